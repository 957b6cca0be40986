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
