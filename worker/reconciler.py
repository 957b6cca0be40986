"""Reconciler: requeues running jobs whose lease expired (their worker died), and
republishes queued jobs whose message is gone (prefetched by a killed worker).

Runs as a thread in each worker's main process; the requeue step is atomic in
Redis, so when several workers notice the same job only one republishes it.
Also writes this worker's heartbeat for the health endpoint.
"""
from __future__ import annotations

import logging
import os
import threading
import time
from typing import Callable

from jobs.store import JobStore

log = logging.getLogger(__name__)


class Reconciler:
    def __init__(self, store: JobStore, publish: Callable[[str], None], name: str, info: dict,
                 period: float = 2.0, stranded_seconds: float = 60.0):
        self.store, self.publish, self.name, self.period = store, publish, name, period
        self.stranded_seconds = stranded_seconds
        self.info = {"name": name, "pid": os.getpid(), "started": time.time(), **info}
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name="reconciler", daemon=True)

    def start(self) -> None:
        self._thread.start()

    def stop(self) -> None:
        self._stop.set()

    def _run(self) -> None:
        while not self._stop.is_set():
            try:
                self.tick()
            except Exception as e:
                log.warning("reconciler tick failed: %s", e)
            self._stop.wait(self.period)

    def tick(self) -> None:
        self.store.worker_beat(self.name, {**self.info, "seen": time.time()})
        for job_id in self.store.expired_running():
            action = self.store.requeue(job_id)
            if action == 1:
                log.warning("job %s lost its worker; requeued", job_id)
                self.publish(job_id)
        # Claims are fenced, so a duplicate message for a job is harmless.
        for job_id in self.store.stranded_queued(older_than=self.stranded_seconds):
            log.warning("job %s queued but its message is gone; republished", job_id)
            self.publish(job_id)
