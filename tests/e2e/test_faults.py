"""Faults on real processes: killed workers, a killed Redis, hostile queue messages, runaways.

Trial counts are small in CI; STIFFLANE_FAULT_TRIALS raises them (e.g. 20) for a nightly run.
Everything runs on loopback against this test's own Redis and processes.
"""
import os
import signal
import time
from pathlib import Path

import pytest
import redis
from celery import Celery

from jobs.queue import SOLVE_TASK
from tests.conftest import RedisServer
from tests.stack import Stack
from tests.e2e.test_stack import LONG, linear_spec, oscillator_span

pytestmark = pytest.mark.e2e
TRIALS = int(os.environ.get("STIFFLANE_FAULT_TRIALS", "3"))


@pytest.fixture(scope="module")
def faulty():
    """A stack on a Redis of its own, so killing that Redis disturbs no other test."""
    server = RedisServer()
    stack = Stack(server.url)
    stack.redis_server = server
    yield stack
    stack.stop()
    server.stop()


def db(stack) -> redis.Redis:
    return redis.Redis.from_url(stack.env["REDIS_URL"])


def record(stack, job_id) -> dict:
    raw = db(stack).hgetall(f"{stack.env['STIFFLANE_KEY_PREFIX']}:job:{job_id}")
    return {k.decode(): v for k, v in raw.items() if k != b"spec"}


def worker_children(stack) -> list[int]:
    path = Path(f"/proc/{stack.worker.pid}/task/{stack.worker.pid}/children")
    return [int(p) for p in path.read_text().split()] if path.exists() else []


class Evil:
    """Unpickling this would run a command; a JSON-only worker never unpickles it."""

    def __init__(self, marker: str):
        self.marker = marker

    def __reduce__(self):
        return (os.system, (f"touch {self.marker}",))


def test_a_pickle_message_is_refused_and_the_worker_stays_up(faulty, tmp_path):
    marker = tmp_path / "executed"
    evil = Celery("evil", broker=faulty.env["REDIS_URL"])
    evil.conf.update(task_serializer="pickle", accept_content=["pickle", "json"])
    evil.send_task(SOLVE_TASK, args=[Evil(str(marker))], queue=faulty.env["STIFFLANE_INTERACTIVE_QUEUE"],
                   serializer="pickle")
    job_id = faulty.submit(linear_spec())
    assert faulty.wait(job_id)["state"] == "succeeded"
    assert not marker.exists() and faulty.worker.poll() is None


def test_the_same_message_twice_gives_one_result(faulty):
    job_id = faulty.submit(linear_spec())
    faulty.wait(job_id)
    celery = Celery("again", broker=faulty.env["REDIS_URL"])
    celery.conf.update(task_serializer="json")
    celery.send_task(SOLVE_TASK, args=[job_id], queue=faulty.env["STIFFLANE_INTERACTIVE_QUEUE"])
    second = faulty.submit(linear_spec())  # processed after the duplicate (prefetch 1, one child)
    faulty.wait(second)
    rec = record(faulty, job_id)
    assert int(rec["writes"]) == 1 and int(rec["attempt"]) == 1


def test_a_runaway_explicit_solve_ends_failed_with_diagnostics(faulty):
    spec = {
        "label": "stiff problem forced through an explicit method (e2e)",
        "model": {"states": {"y1": 1.0, "y2": 0.0, "y3": 0.0},
                  # Robertson (1966), as printed in Hairer & Wanner II, sec. IV.1
                  "ddt": {"y1": "-0.04*y1 + 1e4*y2*y3", "y2": "0.04*y1 - 1e4*y2*y3 - 3e7*y2^2",
                          "y3": "3e7*y2^2"}},
        "span": [0.0, 1.0e11], "output": {"count": 2}, "method": "dormand_prince_54",
        "limits": {"max_steps": 100_000_000, "max_wall_seconds": 3},
    }
    started = time.time()
    job_id = faulty.submit(spec)
    view = faulty.wait(job_id, timeout=60)
    assert view["state"] == "failed" and view["outcome"] == "time_limit"
    assert view["digest"]["accepted_steps"] > 1000  # partial diagnostics kept
    took = time.time() - started
    print(f"figure: runaway job with a 3 s limit ended {took:.1f} s after submission")
    assert took < 3 + 5 + 5  # limit + 5 s, plus queueing slack
    assert faulty.wait(faulty.submit(linear_spec()))["state"] == "succeeded"  # worker healthy


def test_kill_9_of_a_worker_child_mid_job_loses_nothing(faulty):
    span = oscillator_span(2.0)
    for trial in range(TRIALS):
        job_id = faulty.submit(dict(LONG, span=[0.0, span], label=f"child kill {trial}"))
        faulty.wait(job_id, states=("running",), timeout=60)
        for pid in worker_children(faulty):
            os.kill(pid, signal.SIGKILL)
        killed = time.time()
        view = faulty.wait(job_id, timeout=60)
        assert view["state"] == "succeeded", view
        assert int(record(faulty, job_id)["writes"]) == 1
        took = time.time() - killed
        print(f"figure: child kill trial {trial}: job done {took:.1f} s after the kill")
        assert took < 10 + 2 * 2.0  # recovery <= 10 s, plus the rerun itself


def test_kill_9_of_the_whole_worker_with_jobs_in_every_state(faulty):
    span = oscillator_span(1.0)
    for trial in range(TRIALS):
        running = faulty.submit(dict(LONG, span=[0.0, span], label=f"running {trial}"))
        faulty.wait(running, states=("running",), timeout=60)
        queued = [faulty.submit(linear_spec()) for _ in range(3)]
        faulty.kill_worker()
        faulty.start_worker()
        for job_id in [running, *queued]:
            assert faulty.wait(job_id, timeout=90)["state"] == "succeeded"
            assert int(record(faulty, job_id)["writes"]) == 1


def test_kill_9_of_redis_with_aof_loses_no_accepted_job(faulty):
    span = oscillator_span(1.5)
    for trial in range(min(TRIALS, 2)):
        running = faulty.submit(dict(LONG, span=[0.0, span], label=f"running through a Redis crash {trial}"))
        faulty.wait(running, states=("running",), timeout=60)
        queued = [faulty.submit(linear_spec()) for _ in range(3)]
        time.sleep(1.2)  # appendfsync everysec: the documented window is one second
        faulty.redis_server.kill()
        time.sleep(1.0)
        faulty.redis_server.start()
        back = time.time()
        for job_id in [running, *queued]:
            assert faulty.wait(job_id, timeout=60)["state"] == "succeeded"
            assert int(record(faulty, job_id)["writes"]) == 1
        took = time.time() - back
        print(f"figure: redis kill trial {trial}: all jobs done {took:.1f} s after Redis restarted")
        assert took < 30 + 2 * 1.5
