"""While Redis is down or hung the API answers 503 with Retry-After within 2 s, and recovers."""
import dataclasses
import os
import signal
import time

import pytest

from jobs.store import JobStore
from tests.conftest import RedisServer
from tests.service.test_jobs_api import DECAY


@pytest.fixture
def own_redis():
    server = RedisServer()
    yield server
    try:
        os.kill(server.proc.pid, signal.SIGCONT)
    except ProcessLookupError:
        pass
    server.stop()


def make_client(settings, server):
    from service import create_app

    s = dataclasses.replace(settings, redis_url=server.url)
    return create_app(s, store=JobStore.connect(s)).test_client()


def timed(fn):
    started = time.perf_counter()
    r = fn()
    return r, time.perf_counter() - started


def test_a_stopped_redis_gives_503_fast(settings, own_redis):
    c = make_client(settings, own_redis)
    assert c.post("/v1/jobs", json=DECAY).status_code == 202
    own_redis.proc.send_signal(signal.SIGSTOP)  # hung: accepts nothing, answers nothing
    try:
        for call in (lambda: c.get("/v1/jobs"), lambda: c.post("/v1/jobs", json=DECAY)):
            r, seconds = timed(call)
            assert r.status_code == 503 and r.headers["Retry-After"] and seconds < 2.0
            assert r.mimetype == "application/problem+json"
        health, seconds = timed(lambda: c.get("/v1/health"))
        assert health.status_code == 503 and seconds < 2.0
    finally:
        own_redis.proc.send_signal(signal.SIGCONT)
    assert c.get("/v1/jobs").status_code == 200  # recovers by itself


def test_a_dead_redis_gives_503_and_a_restarted_one_is_used_again(settings, own_redis):
    c = make_client(settings, own_redis)
    job = c.post("/v1/jobs", json=DECAY).get_json()
    time.sleep(1.2)  # appendfsync everysec: an accepted job is on disk within a second
    own_redis.kill()
    r, seconds = timed(lambda: c.get("/v1/jobs"))
    assert r.status_code == 503 and seconds < 2.0
    own_redis.start()
    assert c.get(f"/v1/jobs/{job['id']}").get_json()["state"] == "queued"  # nothing lost
