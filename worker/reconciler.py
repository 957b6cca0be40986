"""Housekeeping in every worker's main process: one thread, a few idempotent ticks.

- ``beat``: this worker's heartbeat for the health endpoint.
- ``reconcile_jobs``: running jobs whose lease expired (their worker died) go back to
  queued and are published again; queued jobs whose message is gone (prefetched by a
  killed worker) are published again.
- batches add their own tick (``worker.run_batch.reconcile_batches``).

Every step is atomic in Redis, so when several workers notice the same job only one
republishes it, and claims are fenced, so a duplicate message is harmless.
"""
from __future__ import annotations

import logging
import threading
import time
from typing import Callable, Sequence

from jobs.store import JobStore

log = logging.getLogger(__name__)


class Periodic:
    """Runs ``ticks`` every ``period`` seconds on a daemon thread; a failing tick is logged."""

    def __init__(self, ticks: Sequence[Callable[[], None]], period: float = 2.0, name: str = "reconciler"):
        self.ticks, self.period = list(ticks), period
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name=name, daemon=True)

    def start(self) -> None:
        self._thread.start()

    def stop(self) -> None:
        self._stop.set()

    def _run(self) -> None:
        while not self._stop.is_set():
            for tick in self.ticks:
                try:
                    tick()
                except Exception as e:  # Redis blip or the like: try again next period
                    log.warning("%s failed: %s", getattr(tick, "__name__", tick), e)
            self._stop.wait(self.period)


def beat(store: JobStore, info: dict) -> None:
    store.worker_beat(info["name"], {**info, "seen": time.time()})


def reconcile_jobs(store: JobStore, publish: Callable[[str], None], stranded_seconds: float = 60.0) -> None:
    for job_id in store.expired_running():
        if store.requeue(job_id) == 1:
            log.warning("job %s lost its worker; requeued", job_id)
            publish(job_id)
    for job_id in store.stranded_queued(older_than=stranded_seconds):
        log.warning("job %s queued but its message is gone; republished", job_id)
        publish(job_id)
