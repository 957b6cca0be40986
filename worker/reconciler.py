"""Housekeeping in every worker's main process: one thread, a few idempotent ticks.

- ``beat``: this worker's heartbeat for the health endpoint.
- ``reconcile_jobs``: running jobs whose lease expired (their worker died) go back to
  queued and are published again; queued jobs whose message is gone (prefetched by a
  killed worker, lost in a broker crash) are published again, whatever the queue's length
  (``JobStore.stranded_queued``).
- ``clear_unacked``: messages that killed workers had taken stay in the broker's
  unacknowledged set until its visibility timeout (an hour), then come back as duplicates;
  the ones whose job or chunk is settled, queued again or re-claimed are removed.
- batches and calibrations add their own ticks (``worker.run_batch.reconcile_batches``,
  ``worker.run_calibration.reconcile_calibrations``).

Every step is atomic in Redis, so when several workers notice the same job only one
republishes it, and claims are fenced, so a duplicate message is harmless. Removing an
unacknowledged entry is always safe: the job record, not the message, is the truth, and
the two sweeps above republish whatever still needs a message.

Just after Redis restarts, leases are not acted on for one lease period: workers that
kept solving through the outage get the chance to heartbeat before their jobs would be
taken from them (``redis_settled``).
"""
from __future__ import annotations

import logging
import threading
import time
from typing import Callable, Sequence

from jobs import messages
from jobs.batch_store import BatchStore
from jobs.store import JobStore

log = logging.getLogger(__name__)
STRANDED_GRACE_SECONDS = 5.0  # a queued job's message must be seen gone this long before republishing
UNACKED_PER_TICK = 2000       # unacknowledged entries read per tick (the set is usually tiny)


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


def redis_settled(store: JobStore | BatchStore) -> bool:
    """False for one lease period after Redis (re)started: leases wait for the heartbeats."""
    return int(store.r.info("server").get("uptime_in_seconds", 0)) >= store.settings.lease_seconds


def reconcile_jobs(store: JobStore, publish: Callable[[str], None],
                   grace: float = STRANDED_GRACE_SECONDS) -> None:
    if redis_settled(store):
        for job_id in store.expired_running():
            if store.requeue(job_id) == 1:
                log.warning("job %s lost its worker; requeued", job_id)
                publish(job_id)
    for job_id in store.stranded_queued(grace):
        log.warning("job %s queued but its message is gone; republished", job_id)
        publish(job_id)


def clear_unacked(store: JobStore, batches: BatchStore, limit: int = UNACKED_PER_TICK,
                  calibrations=None) -> int:
    """Remove our queues' unacknowledged messages whose job or chunk no longer needs them.

    Kept: for each running job (chunk), the most recently delivered message, which may be
    its live worker's. Removed: the others (an earlier attempt's, from a worker that died),
    and every message whose job (chunk) is queued (waiting), settled or gone. Returns the
    number removed.
    """
    s = store.settings
    ours = {s.interactive_queue, s.batch_queue}
    found = {}  # tag -> ('job', id) | ('chunk', (batch, i)) | ('unit', (calibration, i)); HSCAN may repeat a field
    for tag, raw in store.r.hscan_iter(messages.UNACKED, count=500):
        parsed = messages.unacked_entry(raw)
        if parsed is not None and parsed[1] in ours:
            job_id = messages.job_id_of(parsed[0])
            chunk = None if job_id else messages.chunk_of(parsed[0])
            unit = None if job_id or chunk or calibrations is None else messages.calibration_unit_of(parsed[0])
            if job_id or chunk:
                found[tag] = ("job", job_id) if job_id else ("chunk", chunk)
            elif unit:
                found[tag] = ("unit", unit)
        if len(found) >= limit:
            break
    if not found:
        return 0
    entries = list(found.items())
    pipe = store.r.pipeline(transaction=False)
    for tag, (kind, what) in entries:
        pipe.zscore(messages.UNACKED_INDEX, tag)
        if kind == "job":
            pipe.hget(store.keys.job(what), "state")
        elif kind == "unit":
            pipe.hget(calibrations.keys.calibration_chunks(what[0]), f"s{what[1]}")
        else:
            pipe.hget(batches.keys.batch_chunks(what[0]), f"s{what[1]}")
    replies = pipe.execute()
    newest: dict = {}
    remove = []
    for (tag, key), delivered, state in zip(entries, replies[0::2], replies[1::2]):
        running = state in (b"running", b"r")
        if not running:
            remove.append(tag)
            continue
        delivered = float(delivered or 0.0)
        kept = newest.get(key)
        if kept is None or delivered > kept[1]:
            if kept is not None:
                remove.append(kept[0])
            newest[key] = (tag, delivered)
        else:
            remove.append(tag)
    if remove:
        pipe = store.r.pipeline(transaction=True)
        pipe.zrem(messages.UNACKED_INDEX, *remove)
        pipe.hdel(messages.UNACKED, *remove)
        pipe.execute()
        log.info("removed %d unacknowledged message(s) whose job or chunk no longer needs them", len(remove))
    return len(remove)
