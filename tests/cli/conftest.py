"""The live stack (real gunicorn API, Celery worker, Redis) for the command line's tests."""
import sys

import pytest

from tests.conftest import ROOT

try:  # the client package: installed (pip install -e client/), or from the source tree
    import stifflane_client  # noqa: F401
except ImportError:
    sys.path.insert(0, str(ROOT / "client"))

from tests.e2e.conftest import Stack


@pytest.fixture(scope="session")
def stack(redis_server):
    s = Stack(redis_server.url)
    yield s
    s.stop()
