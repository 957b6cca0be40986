"""The Celery application of the worker: tasks, per-process clients, process hooks.

Start with ``stifflane worker`` (or ``celery -A worker.celery_app worker``). Messages
carry only ids; the records in Redis are the truth (jobs/store.py, jobs/batch_store.py).
"""
from __future__ import annotations

import logging
import os
import socket
import time
from functools import partial

from celery import signals
from celery.exceptions import Reject

from jobs.batch_store import BatchStore
from jobs.calibration_store import CalibrationStore
from jobs.keys import is_job_id
from jobs.queue import BATCH_TASK, CALIBRATION_TASK, SOLVE_TASK, make_celery
from jobs.settings import Settings
from jobs.store import JobStore
from worker import logs as _json_logs  # noqa: F401  (STIFFLANE_LOG_FORMAT=json: JSON lines with job ids)
from worker.broker import contain_closed_channel_fault
from worker.reconciler import Periodic, beat, clear_unacked, reconcile_jobs

log = logging.getLogger(__name__)


contain_closed_channel_fault()  # before any broker connection exists
settings = Settings.from_env()
app = make_celery(settings, "stifflane-worker")
_clients: dict[str, object] = {}  # per process, created after fork
_housekeeping: Periodic | None = None


def store() -> JobStore:
    if "jobs" not in _clients:
        _clients["jobs"] = JobStore.connect(settings)
    return _clients["jobs"]


def batch_store() -> BatchStore:
    if "batches" not in _clients:
        _clients["batches"] = BatchStore.connect(settings)
    return _clients["batches"]


def calibration_store() -> CalibrationStore:
    if "calibrations" not in _clients:
        _clients["calibrations"] = CalibrationStore.connect(settings)
    return _clients["calibrations"]


def publish_job(job_id: str) -> None:
    app.send_task(SOLVE_TASK, args=[job_id], queue=settings.interactive_queue)


def publish_chunk(batch_id: str, chunk: int) -> None:
    app.send_task(BATCH_TASK, args=[batch_id, int(chunk)], queue=settings.batch_queue)


def publish_calibration(cal_id: str, unit: int) -> None:
    app.send_task(CALIBRATION_TASK, args=[cal_id, int(unit)], queue=settings.batch_queue)


@app.task(name=SOLVE_TASK)
def solve(job_id):
    if not isinstance(job_id, str) or not is_job_id(job_id):
        raise Reject(f"not a job id: {job_id!r}", requeue=False)
    from worker.run_job import run_job

    return run_job(store(), job_id)


@app.task(name=BATCH_TASK)
def batch_chunk(batch_id, chunk):
    if not isinstance(batch_id, str) or not is_job_id(batch_id) or not isinstance(chunk, int) or chunk < 0:
        raise Reject(f"not a batch chunk: {batch_id!r}, {chunk!r}", requeue=False)
    from worker.run_batch import run_chunk

    return run_chunk(batch_store(), publish_chunk, batch_id, chunk)


@app.task(name=CALIBRATION_TASK)
def calibration_unit(cal_id, unit):
    if not isinstance(cal_id, str) or not is_job_id(cal_id) or not isinstance(unit, int) or unit < 0:
        raise Reject(f"not a calibration unit: {cal_id!r}, {unit!r}", requeue=False)
    from worker.run_calibration import run_unit

    return run_unit(calibration_store(), publish_calibration, cal_id, unit)


def warm() -> None:
    """Load (or compile once) every compiled kernel."""
    from engine.warmup import warm_up

    warm_up()


@signals.worker_init.connect
def _warm_before_fork(**_):
    """Load the compiled kernels in the main process so every child inherits them."""
    try:
        warm()
    except Exception as e:  # a cold start is slower, not broken
        log.warning("engine warm-up failed: %s", e)


@signals.worker_process_init.connect
def _fresh_clients(**_):
    _clients.clear()  # never share a socket across fork


def concurrency_of(consumer) -> int | None:
    """The pool processes of this worker (-c). worker_ready is sent by the Consumer, whose
    WorkController (``controller``) holds the number; the pool knows it too."""
    for value in (getattr(getattr(consumer, "controller", None), "concurrency", None),
                  getattr(getattr(consumer, "pool", None), "num_processes", None),
                  getattr(consumer, "concurrency", None)):
        if isinstance(value, int) and not isinstance(value, bool) and value > 0:
            return value
    return None


@signals.worker_ready.connect
def _start_housekeeping(sender=None, **_):
    global _housekeeping
    from worker.run_batch import reconcile_batches
    from worker.run_calibration import reconcile_calibrations

    info = {"name": f"{socket.gethostname()}:{os.getpid()}", "pid": os.getpid(), "started": time.time(),
            "concurrency": concurrency_of(sender)}
    _housekeeping = Periodic([partial(beat, store(), info),
                              partial(reconcile_jobs, store(), publish_job),
                              partial(reconcile_batches, batch_store(), publish_chunk),
                              partial(reconcile_calibrations, calibration_store(), publish_calibration),
                              partial(clear_unacked, store(), batch_store(), calibrations=calibration_store())])
    _housekeeping.start()


@signals.worker_shutdown.connect
def _stop_housekeeping(**_):
    if _housekeeping is not None:
        _housekeeping.stop()
