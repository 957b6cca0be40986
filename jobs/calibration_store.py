"""CalibrationStore: the only code that reads or writes calibration records, chunk states,
start outcomes and estimates.

A calibration is one hash (spec compressed inside it, counters and the best sum of squares
so far beside them), a chunk-state hash, a lease zset, one compressed blob of start
outcomes per finished chunk and, at the end, the compressed estimate. Submitting writes one
hash and two index entries, whatever the number of starts. Transitions are the Lua scripts
of jobs/calibration_lifecycle.py. Imports neither Flask, Celery nor the engine.
"""
from __future__ import annotations

import json
import math
import time
from dataclasses import dataclass
from typing import Optional

import redis

from jobs import calibration_lifecycle as L
from jobs.blob import pack_json as pack, unpack_json as unpack
from jobs.keys import Keys, new_job_id
from jobs.settings import Settings

VIEW_FIELDS = ("state", "rev", "owner", "title", "created", "started", "finished", "total", "chunk_size",
               "n_chunks", "finished_chunks", "done", "failed", "cancelled", "lost", "failed_solves",
               "best", "best_start", "cancel", "stage", "message", "data", "unknowns", "seed")
ACTIVE = ("queued", "running")


@dataclass(frozen=True)
class CalibrationRecord:
    id: str
    state: str
    rev: int
    owner: str
    title: str
    created: float
    started: Optional[float]
    finished: Optional[float]
    total: int               # starts
    chunk_size: int
    n_chunks: int
    finished_chunks: int
    done: int                # starts that ended converged or at their evaluation limit
    failed: int              # starts that ended failed (their outcome says why)
    cancelled: int           # starts never run because of a cancel
    lost: int                # starts of chunks whose worker died too often
    failed_solves: int       # solves that failed inside the optimiser, over all starts (penalised)
    best: Optional[float]    # the smallest sum of squares reached so far
    best_start: Optional[int]
    cancel_requested: bool
    stage: str               # starts | summary | done
    message: str
    data: dict               # facts about the measurements (rows, points, skipped cells, ...)
    unknowns: list
    seed: int

    def progress(self, now: float | None = None) -> dict:
        now = time.time() if now is None else now
        end = self.finished or now
        elapsed = (end - self.started) if self.started else 0.0
        finished = self.done + self.failed + self.lost
        rate = finished / elapsed if elapsed > 0 and finished else None
        remaining = self.total - finished - self.cancelled
        eta = (remaining / rate) if rate and self.state in ACTIVE else (0.0 if self.state not in ACTIVE else None)
        return {"total": self.total, "done": self.done, "failed": self.failed, "cancelled": self.cancelled,
                "lost": self.lost, "remaining": remaining,
                "fraction": (finished + self.cancelled) / self.total if self.total else 1.0,
                "failed_solves": self.failed_solves, "best_sum_of_squares": self.best,
                "best_start": self.best_start, "starts_per_second": rate, "eta_seconds": eta}


def _s(v) -> Optional[str]:
    return None if v is None else v.decode() if isinstance(v, bytes) else str(v)


def _f(v) -> Optional[float]:
    return None if v in (None, b"", "") else float(v)


def _i(v) -> int:
    return int(v or 0)


def _record(cal_id: str, values: list) -> Optional[CalibrationRecord]:
    d = dict(zip(VIEW_FIELDS, values))
    if d["state"] is None:
        return None
    best = _f(d["best"])
    return CalibrationRecord(
        id=cal_id, state=_s(d["state"]), rev=_i(d["rev"]), owner=_s(d["owner"]) or "",
        title=_s(d["title"]) or "", created=float(d["created"]), started=_f(d["started"]),
        finished=_f(d["finished"]), total=_i(d["total"]), chunk_size=_i(d["chunk_size"]),
        n_chunks=_i(d["n_chunks"]), finished_chunks=_i(d["finished_chunks"]), done=_i(d["done"]),
        failed=_i(d["failed"]), cancelled=_i(d["cancelled"]), lost=_i(d["lost"]),
        failed_solves=_i(d["failed_solves"]), best=best if best is None or math.isfinite(best) else None,
        best_start=None if d["best_start"] in (None, b"") else int(d["best_start"]),
        cancel_requested=_s(d["cancel"]) == "1", stage=_s(d["stage"]) or "starts",
        message=_s(d["message"]) or "", data=json.loads(_s(d["data"]) or "{}"),
        unknowns=json.loads(_s(d["unknowns"]) or "[]"), seed=_i(d["seed"]))




class CalibrationStore:
    def __init__(self, client: redis.Redis, settings: Settings):
        self.r = client
        self.settings = settings
        self.keys = Keys(settings.key_prefix)
        self._claim = client.register_script(L.CLAIM)
        self._heartbeat = client.register_script(L.HEARTBEAT)
        self._finish = client.register_script(L.FINISH)
        self._finish_summary = client.register_script(L.FINISH_SUMMARY)
        self._next = client.register_script(L.NEXT)
        self._cancel = client.register_script(L.CANCEL)
        self._requeue = client.register_script(L.REQUEUE)

    @classmethod
    def connect(cls, settings: Settings, **client_options) -> "CalibrationStore":
        options = dict(socket_timeout=5, socket_connect_timeout=2, health_check_interval=15)
        options.update(client_options)
        return cls(redis.Redis.from_url(settings.redis_url, **options), settings)

    def _k(self, cal_id: str, *extra: str) -> list[str]:
        k = self.keys
        return [k.calibration(cal_id), k.calibration_chunks(cal_id), k.calibration_leases(cal_id),
                k.calibrations_active(), k.calibrations_active_owners(), *extra]

    # ---- API side -------------------------------------------------------
    def active_count(self, owner: str) -> int:
        return int(self.r.hget(self.keys.calibrations_active_owners(), owner) or 0)

    def create(self, spec: dict, data: dict, unknowns: list, starts: int, chunk_size: int, seed: int,
               title: str, owner: str) -> CalibrationRecord:
        """Write a queued calibration (one transaction); starts are generated by the workers."""
        now = time.time()
        cal_id = new_job_id(now)
        key = self.keys.calibration(cal_id)
        pipe = self.r.pipeline(transaction=True)
        pipe.hset(key, mapping={
            "state": "queued", "rev": 1, "owner": owner, "title": title, "created": repr(now),
            "total": starts, "chunk_size": chunk_size, "n_chunks": math.ceil(starts / chunk_size),
            "published": 0, "inflight": 0, "finished_chunks": 0, "done": 0, "failed": 0, "cancelled": 0,
            "lost": 0, "failed_solves": 0, "cancel": "0", "writes": 0, "stage": "starts", "seed": seed,
            "data": json.dumps(data), "unknowns": json.dumps(unknowns), "spec": pack(spec)})
        pipe.expire(key, self.settings.result_ttl_seconds)
        pipe.zadd(self.keys.calibrations_owner(owner), {cal_id: 0})
        pipe.zadd(self.keys.calibrations_active(), {cal_id: now})
        pipe.hincrby(self.keys.calibrations_active_owners(), owner, 1)
        pipe.execute()
        return self.get(cal_id)

    def get(self, cal_id: str) -> Optional[CalibrationRecord]:
        return _record(cal_id, self.r.hmget(self.keys.calibration(cal_id), VIEW_FIELDS))

    def spec(self, cal_id: str) -> Optional[dict]:
        return unpack(self.r.hget(self.keys.calibration(cal_id), "spec"))

    def estimate(self, cal_id: str) -> Optional[dict]:
        return unpack(self.r.get(self.keys.calibration_estimate(cal_id)))

    def list(self, owner: str, limit: int, after: Optional[str]) -> tuple[list[CalibrationRecord], Optional[str]]:
        """One owner's calibrations, newest first; ``after`` is the last id of the previous page."""
        index = self.keys.calibrations_owner(owner)
        upper = f"({after}" if after else "+"
        ids = [_s(i) for i in self.r.zrevrangebylex(index, upper, "-", start=0, num=limit + 1)]
        pipe = self.r.pipeline(transaction=False)
        for i in ids:
            pipe.hmget(self.keys.calibration(i), VIEW_FIELDS)
        records, stale = [], []
        for i, values in zip(ids, pipe.execute()):
            rec = _record(i, values)
            (stale if rec is None else records).append(i if rec is None else rec)
        if stale:
            self.r.zrem(index, *stale)  # expired calibrations: drop their index entries lazily
        more = len(records) > limit
        records = records[:limit]
        return records, (records[-1].id if more and records else None)

    def cancel(self, cal_id: str) -> str:
        return _s(self._cancel(keys=self._k(cal_id), args=[cal_id, self.settings.result_ttl_seconds]))

    def next_chunks(self, cal_id: str) -> list[int]:
        """Units to publish now: start chunks within the owner's window, then the summary."""
        s = self.settings
        return [int(i) for i in self._next(keys=self._k(cal_id), args=[
            s.calibration_chunks_in_flight, s.batch_stale_seconds])]

    def chunk_states(self, cal_id: str) -> dict[int, str]:
        raw = self.r.hgetall(self.keys.calibration_chunks(cal_id))
        return {int(_s(k)[1:]): _s(v) for k, v in raw.items() if _s(k).startswith("s")}

    def start_outcomes(self, cal_id: str, n_chunks: int, per_call: int = 100) -> list[dict]:
        """Every start outcome written so far (chunk order)."""
        out = []
        for at in range(0, n_chunks, per_call):
            part = range(at, min(at + per_call, n_chunks))
            for blob in self.r.mget([self.keys.calibration_starts(cal_id, i) for i in part]):
                if blob is not None:
                    out.extend(unpack(blob)["outcomes"])
        return out

    # ---- worker side ----------------------------------------------------
    def claim_chunk(self, cal_id: str, chunk: int) -> tuple[str, int]:
        s = self.settings
        status, attempt = self._claim(keys=self._k(cal_id), args=[
            cal_id, chunk, s.lease_seconds, s.max_attempts, s.result_ttl_seconds])
        return _s(status), int(attempt)

    def heartbeat_chunk(self, cal_id: str, chunk: int, attempt: int) -> int:
        """Extend the lease. -1: fenced out; 1: cancel requested; 0: carry on."""
        return int(self._heartbeat(keys=self._k(cal_id), args=[chunk, attempt, self.settings.lease_seconds]))

    def finish_chunk(self, cal_id: str, chunk: int, attempt: int, counts: tuple[int, int, int],
                     failed_solves: int, best: tuple[float, int] | None, blob: bytes) -> int:
        """Write the chunk's outcomes if ``attempt`` is current. 0 fenced, 1 written, 2 every start is in."""
        done, failed, cancelled = counts
        best_value, best_start = (repr(float(best[0])), int(best[1])) if best else ("", -1)
        return int(self._finish(keys=self._k(cal_id, self.keys.calibration_starts(cal_id, chunk)), args=[
            cal_id, chunk, attempt, done, failed, cancelled, failed_solves, best_value, best_start,
            self.settings.result_ttl_seconds, blob]))

    def finish_summary(self, cal_id: str, attempt: int, state: str, message: str,
                       estimate: dict | None) -> int:
        """Settle the calibration with its estimate (or a failure message). 0 fenced, 1 written."""
        blob = pack(estimate) if estimate is not None else b""
        return int(self._finish_summary(keys=self._k(cal_id, self.keys.calibration_estimate(cal_id)), args=[
            cal_id, attempt, state, message, self.settings.result_ttl_seconds, blob]))

    def active_ids(self) -> list[str]:
        return [_s(i) for i in self.r.zrange(self.keys.calibrations_active(), 0, -1)]

    def requeue_expired(self, cal_id: str) -> list[int]:
        """Units whose worker died, or whose message went missing, to (re)publish now."""
        if not self.r.exists(self.keys.calibration(cal_id)):
            self.r.zrem(self.keys.calibrations_active(), cal_id)
            return []
        return [int(i) for i in self._requeue(keys=self._k(cal_id), args=[
            cal_id, self.settings.result_ttl_seconds, self.settings.batch_stale_seconds])]
