"""A result computed while Redis is down is kept: the fenced finish is retried while the lease holds.

Real Redis (a server of this test's own, killed with SIGKILL and started again on the same
port and AOF); the fault is injected at the moment the worker writes its result.
"""
import threading
import uuid

import pytest
import redis

from jobs.batch_store import BatchStore
from jobs.settings import Settings
from jobs.store import JobStore
from tests.conftest import RedisServer
from worker.run_batch import run_chunk
from worker.run_job import run_job

SPEC = {"model": {"states": {"y": 1.0}, "ddt": {"y": "-y"}}, "span": [0.0, 1.0]}
OUTAGE_SECONDS = 1.5


@pytest.fixture
def outage_redis():
    server = RedisServer()
    redis.Redis(port=server.port).config_set("appendfsync", "always")  # the restart keeps every write
    server.restarts = []
    yield server
    for timer in server.restarts:
        timer.join()
    server.stop()


@pytest.fixture
def osettings(outage_redis):
    tag = uuid.uuid4().hex[:8]
    return Settings(redis_url=outage_redis.url, key_prefix=f"o{tag}", interactive_queue=f"stifflane.o.{tag}",
                    batch_queue=f"stifflane.o.{tag}.b", lease_seconds=6.0, auth_mode="off")


def outage_at_first_call(server, store, name):
    """Replace store.<name> by one that kills Redis before its first call (restart after a while)."""
    real = getattr(store, name)

    def during_an_outage(*args, **kwargs):
        setattr(store, name, real)
        server.proc.kill()
        server.proc.wait(10)
        timer = threading.Timer(OUTAGE_SECONDS, server.start)
        server.restarts.append(timer)
        timer.start()
        return real(*args, **kwargs)

    setattr(store, name, during_an_outage)


def test_a_job_that_finishes_while_redis_is_down_keeps_its_result(outage_redis, osettings):
    # The finish used to raise ConnectionError: the result was dropped, the job ran again
    # after its lease and spent an attempt.
    store = JobStore.connect(osettings)
    rec = store.create(SPEC, title="finish in an outage", method="auto", owner="ana")
    outage_at_first_call(outage_redis, store, "finish")
    assert run_job(store, rec.id) == "succeeded"
    final = store.get(rec.id)
    assert final.state == "succeeded" and final.attempt == 1
    assert int(store.r.hget(store.keys.job(rec.id), "writes")) == 1
    assert store.result_blob(rec.id) is not None


def test_a_chunk_that_finishes_while_redis_is_down_keeps_its_rows(outage_redis, osettings):
    store = BatchStore.connect(osettings)
    base = {**SPEC, "model": {**SPEC["model"], "parameters": {"k": 1.0}, "ddt": {"y": "-k*y"}}}
    spec = {"base": base, "grid": {"parameters": {"k": [1.0, 2.0]}}, "summaries": [{"kind": "final", "of": "y"}]}
    design = {"kind": "grid", "columns": [["parameters", "k"]], "axes": [[1.0, 2.0]]}
    batch = store.create(spec, design, {"values": ["k"], "summaries": ["final_y"]}, 2, 2, "outage", "ana")
    assert store.next_chunks(batch.id) == [0]
    outage_at_first_call(outage_redis, store, "finish_chunk")
    assert run_chunk(store, lambda b, c: None, batch.id, 0) == "settled"
    final = store.get(batch.id)
    assert final.state == "succeeded" and final.succeeded == 2
    assert int(store.r.hget(store.keys.batch(batch.id), "writes")) == 1
