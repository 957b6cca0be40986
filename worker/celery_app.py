"""The Celery application of the worker: task registration and process hooks.

Start with ``stifflane worker`` (or ``celery -A worker.celery_app worker``).
"""
from __future__ import annotations

import logging
import os
import socket

from celery import signals
from celery.exceptions import Reject

from jobs.keys import is_job_id
from jobs.queue import SOLVE_TASK, make_celery
from jobs.settings import Settings
from jobs.store import JobStore
from worker.reconciler import Reconciler

log = logging.getLogger(__name__)
settings = Settings.from_env()
app = make_celery(settings, "stifflane-worker")
_store: JobStore | None = None
_reconciler: Reconciler | None = None


def store() -> JobStore:
    """One Redis client per process (created after fork)."""
    global _store
    if _store is None:
        _store = JobStore.connect(settings)
    return _store


@app.task(name=SOLVE_TASK, bind=True)
def solve(self, job_id):
    if not isinstance(job_id, str) or not is_job_id(job_id):
        raise Reject(f"not a job id: {job_id!r}", requeue=False)
    from worker.run_job import run_job

    return run_job(store(), job_id)


@signals.worker_init.connect
def _warm_before_fork(**_):
    """Load the compiled kernels in the main process so every child inherits them."""
    try:
        warm()
    except Exception as e:  # a cold start is slower, not broken
        log.warning("engine warm-up failed: %s", e)


@signals.worker_process_init.connect
def _fresh_client(**_):
    global _store
    _store = None  # never share a socket across fork


@signals.worker_ready.connect
def _start_reconciler(sender=None, **_):
    global _reconciler
    name = f"{socket.gethostname()}:{os.getpid()}"
    concurrency = getattr(sender, "concurrency", None) if sender is not None else None
    _reconciler = Reconciler(store(), lambda job_id: app.send_task(
        SOLVE_TASK, args=[job_id], queue=settings.interactive_queue), name, {"concurrency": concurrency})
    _reconciler.start()


@signals.worker_shutdown.connect
def _stop_reconciler(**_):
    if _reconciler is not None:
        _reconciler.stop()


def warm() -> None:
    """Load (or compile once) every compiled kernel before children fork."""
    from engine.warmup import warm_up

    warm_up()


# ---- batches (worker/run_batch.py): chunks arrive on settings.batch_queue ----
from jobs.batch_store import BatchStore  # noqa: E402
from jobs.queue import BATCH_TASK  # noqa: E402

_batch_store: BatchStore | None = None
_batch_reconciler = None


def batch_store() -> BatchStore:
    """One Redis client per process (created after fork)."""
    global _batch_store
    if _batch_store is None:
        _batch_store = BatchStore.connect(settings)
    return _batch_store


def publish_chunk(batch_id: str, chunk: int) -> None:
    app.send_task(BATCH_TASK, args=[batch_id, int(chunk)], queue=settings.batch_queue)


@app.task(name=BATCH_TASK)
def batch_chunk(batch_id, chunk):
    if not isinstance(batch_id, str) or not is_job_id(batch_id) or not isinstance(chunk, int) or chunk < 0:
        raise Reject(f"not a batch chunk: {batch_id!r}, {chunk!r}", requeue=False)
    from worker.run_batch import run_chunk

    return run_chunk(batch_store(), publish_chunk, batch_id, chunk)


@signals.worker_process_init.connect
def _fresh_batch_client(**_):
    global _batch_store
    _batch_store = None


@signals.worker_ready.connect
def _start_batch_reconciler(**_):
    global _batch_reconciler
    from worker.run_batch import BatchReconciler

    _batch_reconciler = BatchReconciler(batch_store(), publish_chunk)
    _batch_reconciler.start()


@signals.worker_shutdown.connect
def _stop_batch_reconciler(**_):
    if _batch_reconciler is not None:
        _batch_reconciler.stop()
