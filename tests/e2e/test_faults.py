"""Faults on real processes: killed workers, a killed Redis, hostile queue messages, runaways.

Trial counts are small in CI; STIFFLANE_FAULT_TRIALS raises them (e.g. 20) for a nightly run.
Everything runs on loopback against this test's own Redis and processes.
"""
import json
import os
import signal
import subprocess
import time
from pathlib import Path

import pytest
import redis
from celery import Celery

from cli import supervise
from cli.main import worker_command
from jobs import messages
from jobs.queue import SOLVE_TASK
from jobs.settings import Settings
from tests.conftest import RedisServer
from tests.stack import Stack
from tests.e2e.test_stack import LONG, linear_spec, oscillator_span

pytestmark = pytest.mark.e2e
TRIALS = int(os.environ.get("STIFFLANE_FAULT_TRIALS", "3"))
DEFAULT_LEASE = Settings().lease_seconds
RECONCILE_PERIOD = 2.0  # worker.reconciler.Periodic


@pytest.fixture(scope="module")
def faulty():
    """A stack on a Redis of its own, so killing that Redis disturbs no other test."""
    server = RedisServer()
    oscillator_span(0.1)  # loads the kernels here, so later calibrations measure the solve alone
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


def children(pid: int) -> list[int]:
    path = Path(f"/proc/{pid}/task/{pid}/children")
    return [int(p) for p in path.read_text().split()] if path.exists() else []


def worker_children(stack) -> list[int]:
    return children(stack.worker.pid)


def start_worker(stack, concurrency: int = 1, supervised: bool = False, **env) -> int:
    """Replace the stack's worker (optionally under the supervisor, with extra environment);
    returns the pid of the Celery main process."""
    if stack.worker is not None and stack.worker.poll() is None:
        stop_worker(stack)
    saved = dict(stack.env)
    stack.env.update(env)
    for name in [k for k, v in env.items() if v is None]:
        del stack.env[name]
    try:
        inner = worker_command(concurrency, stack.env["STIFFLANE_INTERACTIVE_QUEUE"] + ","
                               + stack.env["STIFFLANE_BATCH_QUEUE"])
        stack.worker = stack._spawn("worker", supervise.command(inner) if supervised else inner)
        deadline = time.time() + 60
        while time.time() < deadline:  # ready once its housekeeping wrote a heartbeat
            main = celery_main(stack) if supervised else stack.worker.pid
            if main and any(b.get("pid") == main for b in worker_beats(stack)):
                return main
            time.sleep(0.2)
        raise RuntimeError("worker did not report in; see var/test-logs")
    finally:
        stack.env.clear()
        stack.env.update(saved)


def stop_worker(stack) -> None:
    os.killpg(stack.worker.pid, signal.SIGTERM)  # the supervisor passes it on: a warm shutdown
    try:
        stack.worker.wait(30)
    except subprocess.TimeoutExpired:
        os.killpg(stack.worker.pid, signal.SIGKILL)
        stack.worker.wait(10)


def worker_beats(stack) -> list[dict]:
    prefix = stack.env["STIFFLANE_KEY_PREFIX"]
    r = db(stack)
    return [json.loads(v) for v in (r.get(k) for k in r.scan_iter(match=f"{prefix}:worker:*")) if v]


def celery_main(stack):
    """The Celery main process of a supervised worker (the supervisor's child), or None."""
    kids = children(stack.worker.pid)
    return kids[0] if kids else None


def unacked_of(stack) -> list:
    """Our queue's entries in the broker's unacknowledged set."""
    queue = stack.env["STIFFLANE_INTERACTIVE_QUEUE"]
    out = []
    for tag, raw in db(stack).hscan_iter(messages.UNACKED):
        parsed = messages.unacked_entry(raw)
        if parsed and parsed[1] == queue:
            out.append(tag)
    return out


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
    # With the default lease (not the tests' 3 s): the job is claimed again within
    # lease + one heartbeat period + one reconciler period of the kill, which RELIABILITY.md
    # states; the killed worker's message leaves the unacknowledged set.
    span = oscillator_span(2.0)
    bound = DEFAULT_LEASE + 1.0 + RECONCILE_PERIOD
    start_worker(faulty, STIFFLANE_LEASE_SECONDS=None)
    try:
        for trial in range(TRIALS):
            job_id = faulty.submit(dict(LONG, span=[0.0, span], label=f"child kill {trial}"))
            faulty.wait(job_id, states=("running",), timeout=60)
            time.sleep(0.5)
            for pid in worker_children(faulty):
                os.kill(pid, signal.SIGKILL)
            killed = time.time()
            while int(record(faulty, job_id).get("attempt", 0)) < 2 and time.time() - killed < 60:
                time.sleep(0.05)
            reclaimed = time.time() - killed
            view = faulty.wait(job_id, timeout=60)
            took = time.time() - killed
            assert view["state"] == "succeeded", view
            rec = record(faulty, job_id)
            assert int(rec["writes"]) == 1 and int(rec["attempt"]) == 2
            print(f"figure: child kill trial {trial} (lease {DEFAULT_LEASE:g} s): claimed again "
                  f"{reclaimed:.1f} s and done {took:.1f} s after the kill")
            assert reclaimed < bound + 2.0  # 2 s of slack for a loaded 2-core machine
            deadline = time.time() + 3 * RECONCILE_PERIOD + 5
            while unacked_of(faulty) and time.time() < deadline:
                time.sleep(0.2)
            assert unacked_of(faulty) == []  # the dead child's message is not left to come back
    finally:
        start_worker(faulty)


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


def test_kill_9_of_redis_with_one_task_in_flight_the_worker_keeps_consuming(faulty):
    # With one task unacknowledged, kombu used to raise AttributeError while Celery closed
    # the broken connection, and the worker exited for good ("Unrecoverable error"). Two
    # processes, as `stifflane worker` runs on this machine; the Celery main process must
    # survive every kill (the supervisor is not what keeps it alive here).
    span = oscillator_span(1.5)
    trials = int(os.environ.get("STIFFLANE_REDIS_KILL_TRIALS", str(max(TRIALS, 3))))
    main = start_worker(faulty, concurrency=2, supervised=True)
    try:
        for trial in range(trials):
            job_id = faulty.submit(dict(LONG, span=[0.0, span], label=f"one in flight {trial}"))
            faulty.wait(job_id, states=("running",), timeout=60)
            time.sleep(1.2)  # appendfsync everysec: past the documented one-second window
            faulty.redis_server.kill()
            time.sleep(1.0)
            faulty.redis_server.start()
            back = time.time()
            view = faulty.wait(job_id, timeout=60)
            assert view["state"] == "succeeded", view
            rec = record(faulty, job_id)
            assert int(rec["writes"]) == 1
            print(f"figure: redis kill with one task in flight, trial {trial}: done {time.time() - back:.1f} s "
                  f"after Redis restarted, attempt {int(rec['attempt'])}")
            assert celery_main(faulty) == main, "the worker exited"
        after = faulty.submit(linear_spec())
        assert faulty.wait(after, timeout=60)["state"] == "succeeded"  # still consuming
    finally:
        start_worker(faulty)


def test_a_supervised_worker_that_exits_is_started_again(faulty):
    span = oscillator_span(1.0)
    first = start_worker(faulty, supervised=True)
    try:
        job_id = faulty.submit(dict(LONG, span=[0.0, span], label="worker exits"))
        faulty.wait(job_id, states=("running",), timeout=60)
        os.killpg(first, signal.SIGKILL)  # the Celery main process and its pool, not the supervisor
        assert faulty.wait(job_id, timeout=90)["state"] == "succeeded"
        second = celery_main(faulty)
        assert second not in (None, first) and faulty.worker.poll() is None
        assert faulty.wait(faulty.submit(linear_spec()), timeout=60)["state"] == "succeeded"
    finally:
        start_worker(faulty)
