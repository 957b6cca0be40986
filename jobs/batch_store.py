"""BatchStore: the only code that reads or writes batch records, chunk states and chunk results.

A batch is one hash (spec and design compressed inside it, counters beside
them), a chunk-state hash, a lease zset for running chunks and one compressed
result blob per finished chunk. Submitting writes one hash and two index
entries, whatever the member count. Transitions are the Lua scripts of
jobs/batch_lifecycle.py. Imports neither Flask, Celery nor the engine.
"""
from __future__ import annotations

import json
import math
import time
from dataclasses import dataclass
from typing import Optional

import redis

from jobs import batch_lifecycle as L
from jobs.blob import pack_json as _pack, unpack_json as _unpack
from jobs.keys import Keys, new_job_id
from jobs.settings import Settings

VIEW_FIELDS = ("state", "rev", "owner", "title", "created", "started", "finished", "total",
               "chunk_size", "n_chunks", "published", "finished_chunks", "done", "failed",
               "cancelled", "lost", "cancel", "columns")
ACTIVE = ("queued", "running")


@dataclass(frozen=True)
class BatchRecord:
    id: str
    state: str
    rev: int
    owner: str
    title: str
    created: float
    started: Optional[float]
    finished: Optional[float]
    total: int
    chunk_size: int
    n_chunks: int
    finished_chunks: int
    succeeded: int       # members that succeeded
    failed: int          # members whose solve ended otherwise (their rows say why)
    cancelled: int       # members never run because of a cancel
    lost: int            # members of chunks whose worker died too often
    cancel_requested: bool
    columns: dict        # {"values": [...], "summaries": [...]}

    @property
    def completed(self) -> int:
        return self.succeeded + self.failed + self.lost

    def progress(self, now: float | None = None) -> dict:
        """Counts, rate (members per second since start) and estimated seconds left."""
        now = time.time() if now is None else now
        end = self.finished or now
        elapsed = (end - self.started) if self.started else 0.0
        rate = self.completed / elapsed if elapsed > 0 and self.completed else None
        remaining = self.total - self.completed - self.cancelled
        eta = (remaining / rate) if rate and self.state in ACTIVE else (0.0 if self.state not in ACTIVE else None)
        return {"total": self.total, "succeeded": self.succeeded, "failed": self.failed,
                "cancelled": self.cancelled, "lost": self.lost, "remaining": remaining,
                "fraction": (self.completed + self.cancelled) / self.total if self.total else 1.0,
                "members_per_second": rate, "eta_seconds": eta}


def _s(v) -> Optional[str]:
    return None if v is None else v.decode() if isinstance(v, bytes) else str(v)


def _f(v) -> Optional[float]:
    return None if v in (None, b"") else float(v)


def _i(v) -> int:
    return int(v or 0)


def _record(batch_id: str, values: list) -> Optional[BatchRecord]:
    d = dict(zip(VIEW_FIELDS, values))
    if d["state"] is None:
        return None
    return BatchRecord(
        id=batch_id, state=_s(d["state"]), rev=_i(d["rev"]), owner=_s(d["owner"]) or "",
        title=_s(d["title"]) or "", created=float(d["created"]), started=_f(d["started"]),
        finished=_f(d["finished"]), total=_i(d["total"]), chunk_size=_i(d["chunk_size"]),
        n_chunks=_i(d["n_chunks"]), finished_chunks=_i(d["finished_chunks"]),
        succeeded=_i(d["done"]), failed=_i(d["failed"]), cancelled=_i(d["cancelled"]),
        lost=_i(d["lost"]), cancel_requested=_s(d["cancel"]) == "1",
        columns=json.loads(_s(d["columns"]) or "{}"))




def chunk_size_for(total: int, wanted: int, max_chunks: int) -> int:
    """``wanted`` members per chunk, raised so that a batch has at most ``max_chunks`` chunks."""
    return max(1, wanted, math.ceil(total / max_chunks))


class BatchStore:
    def __init__(self, client: redis.Redis, settings: Settings):
        self.r = client
        self.settings = settings
        self.keys = Keys(settings.key_prefix)
        self._claim = client.register_script(L.CLAIM)
        self._heartbeat = client.register_script(L.HEARTBEAT)
        self._finish = client.register_script(L.FINISH)
        self._next = client.register_script(L.NEXT)
        self._cancel = client.register_script(L.CANCEL)
        self._requeue = client.register_script(L.REQUEUE)

    @classmethod
    def connect(cls, settings: Settings, **client_options) -> "BatchStore":
        options = dict(socket_timeout=5, socket_connect_timeout=2, health_check_interval=15)
        options.update(client_options)
        return cls(redis.Redis.from_url(settings.redis_url, **options), settings)

    def _k(self, batch_id: str, *extra: str) -> list[str]:
        k = self.keys
        return [k.batch(batch_id), k.batch_chunks(batch_id), k.batch_leases(batch_id),
                k.batches_active(), k.batches_active_owners(), *extra]

    # ---- API side -------------------------------------------------------
    def create(self, spec: dict, design: dict, columns: dict, total: int, chunk_size: int,
               title: str, owner: str) -> BatchRecord:
        """Write a queued batch (one transaction); members are generated later, by index."""
        now = time.time()
        batch_id = new_job_id(now)
        n_chunks = math.ceil(total / chunk_size)
        key = self.keys.batch(batch_id)
        pipe = self.r.pipeline(transaction=True)
        pipe.hset(key, mapping={
            "state": "queued", "rev": 1, "owner": owner, "title": title, "created": repr(now),
            "total": total, "chunk_size": chunk_size, "n_chunks": n_chunks, "published": 0,
            "inflight": 0, "finished_chunks": 0, "done": 0, "failed": 0, "cancelled": 0, "lost": 0,
            "cancel": "0", "writes": 0, "columns": json.dumps(columns), "spec": _pack(spec),
            "design": _pack(design)})
        pipe.expire(key, self.settings.result_ttl_seconds)
        pipe.zadd(self.keys.batches_owner(owner), {batch_id: 0})
        pipe.zadd(self.keys.batches_active(), {batch_id: now})
        pipe.hincrby(self.keys.batches_active_owners(), owner, 1)
        pipe.execute()
        return self.get(batch_id)

    def get(self, batch_id: str) -> Optional[BatchRecord]:
        return _record(batch_id, self.r.hmget(self.keys.batch(batch_id), VIEW_FIELDS))

    def spec(self, batch_id: str) -> Optional[dict]:
        return _unpack(self.r.hget(self.keys.batch(batch_id), "spec"))

    def design(self, batch_id: str) -> Optional[dict]:
        return _unpack(self.r.hget(self.keys.batch(batch_id), "design"))

    def list(self, owner: str, limit: int, after: Optional[str]) -> tuple[list[BatchRecord], Optional[str]]:
        """One owner's batches, newest first; ``after`` is the last id of the previous page."""
        index = self.keys.batches_owner(owner)
        upper = f"({after}" if after else "+"
        ids = [_s(i) for i in self.r.zrevrangebylex(index, upper, "-", start=0, num=limit + 1)]
        pipe = self.r.pipeline(transaction=False)
        for i in ids:
            pipe.hmget(self.keys.batch(i), VIEW_FIELDS)
        records, stale = [], []
        for i, values in zip(ids, pipe.execute()):
            rec = _record(i, values)
            (stale if rec is None else records).append(i if rec is None else rec)
        if stale:
            self.r.zrem(index, *stale)  # expired batches: drop their index entries lazily
        more = len(records) > limit
        records = records[:limit]
        return records, (records[-1].id if more and records else None)

    def cancel(self, batch_id: str) -> str:
        return _s(self._cancel(keys=self._k(batch_id),
                               args=[batch_id, self.settings.result_ttl_seconds]))

    def next_chunks(self, batch_id: str) -> list[int]:
        """Chunk indexes to publish now: at most ``batch_chunks_in_flight`` in flight per owner,
        shared by the owner's unsettled batches."""
        s = self.settings
        return [int(i) for i in self._next(keys=self._k(batch_id), args=[
            s.batch_chunks_in_flight, s.batch_stale_seconds])]

    def chunk_states(self, batch_id: str) -> dict[int, str]:
        """{chunk: state} for chunks that have one ('r', 'd', 'c', 'x'); absent = waiting."""
        raw = self.r.hgetall(self.keys.batch_chunks(batch_id))
        out = {}
        for k, v in raw.items():
            k = _s(k)
            if k.startswith("s"):
                out[int(k[1:])] = _s(v)
        return out

    def chunk_results(self, batch_id: str, chunks: list[int], per_call: int = 100):
        """Yield (chunk, blob) for the given chunks (blob None when missing or expired)."""
        for at in range(0, len(chunks), per_call):
            part = chunks[at:at + per_call]
            blobs = self.r.mget([self.keys.batch_result(batch_id, i) for i in part])
            yield from zip(part, blobs)

    # ---- worker side ----------------------------------------------------
    def claim_chunk(self, batch_id: str, chunk: int) -> tuple[str, int]:
        s = self.settings
        status, attempt = self._claim(keys=self._k(batch_id), args=[
            batch_id, chunk, s.lease_seconds, s.max_attempts, s.result_ttl_seconds])
        return _s(status), int(attempt)

    def heartbeat_chunk(self, batch_id: str, chunk: int, attempt: int) -> int:
        """Extend the lease. -1: fenced out; 1: cancel requested; 0: carry on."""
        return int(self._heartbeat(keys=self._k(batch_id), args=[
            chunk, attempt, self.settings.lease_seconds]))

    def finish_chunk(self, batch_id: str, chunk: int, attempt: int, counts: tuple[int, int, int],
                     blob: bytes) -> int:
        """Write the chunk's result if ``attempt`` is current. 0 fenced, 1 written, 2 batch settled."""
        ok, failed, cancelled = counts
        return int(self._finish(keys=self._k(batch_id, self.keys.batch_result(batch_id, chunk)), args=[
            batch_id, chunk, attempt, ok, failed, cancelled,
            self.settings.result_ttl_seconds, blob]))

    def active_ids(self) -> list[str]:
        return [_s(i) for i in self.r.zrange(self.keys.batches_active(), 0, -1)]

    def requeue_expired(self, batch_id: str) -> list[int]:
        """Chunks whose worker died, or whose message went missing, to (re)publish now."""
        if not self.r.exists(self.keys.batch(batch_id)):
            self.r.zrem(self.keys.batches_active(), batch_id)
            return []
        return [int(i) for i in self._requeue(keys=self._k(batch_id), args=[
            batch_id, self.settings.result_ttl_seconds, self.settings.batch_stale_seconds])]
