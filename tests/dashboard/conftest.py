"""The live stack (real gunicorn API, Celery worker, Redis) for the dashboard's tests."""
import pytest

from tests.e2e.conftest import Stack


@pytest.fixture(scope="session")
def stack(redis_server):
    s = Stack(redis_server.url)
    yield s
    s.stop()
