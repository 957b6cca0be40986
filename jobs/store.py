"""JobStore: the only code that reads or writes job records and results in Redis.

The job record is the source of truth; queue messages carry only the job id.
Used by the API (create, read, list, cancel) and the worker (claim, heartbeat,
finish, requeue). Imports neither Flask nor Celery.
"""
from __future__ import annotations

import json
import time
import zlib
from dataclasses import dataclass
from typing import Optional

import redis

from jobs import lifecycle
from jobs.keys import STATES, TERMINAL, Keys, created_at, new_job_id
from jobs.messages import job_id_of
from jobs.settings import Settings

# Fields read for a job view (everything but the spec, which can be large).
VIEW_FIELDS = ("state", "rev", "created", "started", "finished", "progress", "attempt",
               "title", "method", "outcome", "message", "summary", "cancel", "owner")


@dataclass(frozen=True)
class JobRecord:
    id: str
    state: str
    rev: int
    created: float
    started: Optional[float]
    finished: Optional[float]
    progress: float
    attempt: int
    title: str
    method: str
    outcome: Optional[str]
    message: Optional[str]
    summary: Optional[dict]
    cancel_requested: bool
    owner: str

    @property
    def etag(self) -> str:
        return make_etag(self.id, self.rev)


def make_etag(job_id: str, rev: int) -> str:
    return f'"{job_id}.{rev}"'


def _s(v) -> Optional[str]:
    return None if v is None else v.decode() if isinstance(v, bytes) else str(v)


def _f(v) -> Optional[float]:
    return None if v in (None, b"") else float(v)


def _record(job_id: str, values: list) -> Optional[JobRecord]:
    d = dict(zip(VIEW_FIELDS, values))
    if d["state"] is None:
        return None
    summary = _s(d["summary"])
    return JobRecord(
        id=job_id, state=_s(d["state"]), rev=int(d["rev"] or 0), created=float(d["created"]),
        started=_f(d["started"]), finished=_f(d["finished"]),
        progress=float(d["progress"] or 0.0), attempt=int(d["attempt"] or 0),
        title=_s(d["title"]) or "", method=_s(d["method"]) or "auto",
        outcome=_s(d["outcome"]), message=_s(d["message"]),
        summary=json.loads(summary) if summary else None,
        cancel_requested=_s(d["cancel"]) == "1", owner=_s(d["owner"]) or "",
    )


class JobStore:
    def __init__(self, client: redis.Redis, settings: Settings):
        self.r = client
        self.settings = settings
        self.keys = Keys(settings.key_prefix)
        self.index_ttl = settings.result_ttl_seconds + 2 * 24 * 3600

        def script(text: str):
            return client.register_script(text.replace("__INDEX_TTL__", str(self.index_ttl)))

        self._claim = script(lifecycle.CLAIM)
        self._heartbeat = script(lifecycle.HEARTBEAT)
        self._finish = script(lifecycle.FINISH)
        self._cancel = script(lifecycle.CANCEL)
        self._live = script(lifecycle.LIVE)
        self._requeue = script(lifecycle.REQUEUE)
        self._stamp = script(lifecycle.STAMP)
        self._stranded = script(lifecycle.STRANDED)

    @classmethod
    def connect(cls, settings: Settings, **client_options) -> "JobStore":
        t = settings.redis_timeout_seconds
        options = dict(socket_timeout=t, socket_connect_timeout=t, health_check_interval=15)
        options.update(client_options)
        return cls(redis.Redis.from_url(settings.redis_url, **options), settings)

    def durability_problems(self) -> list[str]:
        """Why this Redis is unfit to hold jobs (empty when it is fine).

        An eviction policy would silently drop queued jobs; without AOF a crash
        loses every change since the last snapshot.
        """
        config = self.r.config_get("maxmemory-policy") | self.r.config_get("appendonly")
        problems = []
        if config.get("maxmemory-policy", "noeviction") not in ("noeviction", b"noeviction"):
            problems.append(f"maxmemory-policy is {config['maxmemory-policy']}; set it to noeviction")
        if config.get("appendonly") in ("no", b"no"):
            problems.append("appendonly is off; results can be lost on a crash (set appendonly yes)")
        return problems

    def _script_keys(self, job_id: str, *extra: str) -> list[str]:
        owner = _s(self.r.hget(self.keys.job(job_id), "owner")) or ""
        return [self.keys.job(job_id), *self.keys.state_indexes(),
                *self.keys.owner_state_indexes(owner), *extra]

    # ---- API side -------------------------------------------------------
    def create(self, spec: dict, title: str, method: str, owner: str) -> JobRecord:
        """Write a queued job record (one transaction) and return it."""
        now = time.time()
        job_id = new_job_id(now)
        spec_blob = zlib.compress(json.dumps(spec, separators=(",", ":"), allow_nan=False).encode())
        key = self.keys.job(job_id)
        pipe = self.r.pipeline(transaction=True)
        pipe.hset(key, mapping={"state": "queued", "rev": 1, "created": repr(now), "progress": "0",
                                "attempt": 0, "title": title, "method": method, "owner": owner,
                                "cancel": "0", "spec": spec_blob})
        pipe.expire(key, self.settings.result_ttl_seconds)
        for index in (self.keys.index_state("queued"), self.keys.owner_all(owner),
                      self.keys.owner_state(owner, "queued")):
            pipe.zadd(index, {job_id: 0})
            pipe.expire(index, self.index_ttl)
        self._stamp(keys=[key], client=pipe)  # publication time, on Redis's clock
        pipe.execute()
        return self.get(job_id)

    def get(self, job_id: str, owner: Optional[str] = None) -> Optional[JobRecord]:
        """The job, or None when it does not exist or belongs to another owner."""
        rec = _record(job_id, self.r.hmget(self.keys.job(job_id), VIEW_FIELDS))
        if rec is None or (owner is not None and rec.owner != owner):
            return None
        return rec

    def rev(self, job_id: str) -> Optional[int]:
        v = self.r.hget(self.keys.job(job_id), "rev")
        return None if v is None else int(v)

    def rev_and_owner(self, job_id: str) -> tuple[Optional[int], Optional[str]]:
        rev, owner = self.r.hmget(self.keys.job(job_id), "rev", "owner")
        return (None if rev is None else int(rev)), _s(owner)

    def spec(self, job_id: str) -> Optional[dict]:
        blob = self.r.hget(self.keys.job(job_id), "spec")
        return None if blob is None else json.loads(zlib.decompress(blob))

    def result_blob(self, job_id: str) -> Optional[bytes]:
        return self.r.get(self.keys.result(job_id))

    def live_blob(self, job_id: str) -> Optional[bytes]:
        """The partial result a running attempt wrote last (None before its first one)."""
        return self.r.get(self.keys.live(job_id))

    def cancel(self, job_id: str) -> str:
        return _s(self._cancel(keys=self._script_keys(job_id), args=[job_id]))

    def list(self, owner: str, state: Optional[str], limit: int,
             after: Optional[str]) -> tuple[list[JobRecord], Optional[str]]:
        """One owner's jobs, newest first. ``after`` is the last id of the previous page."""
        index = self.keys.owner_state(owner, state) if state else self.keys.owner_all(owner)
        records: list[JobRecord] = []
        cursor = after
        while len(records) < limit:
            upper = f"({cursor}" if cursor else "+"
            ids = [_s(i) for i in self.r.zrevrangebylex(index, upper, "-", start=0, num=limit + 1)]
            if not ids:
                return records, None
            pipe = self.r.pipeline(transaction=False)
            for i in ids:
                pipe.hmget(self.keys.job(i), VIEW_FIELDS)
            stale = []
            for i, values in zip(ids, pipe.execute()):
                rec = _record(i, values)
                if rec is None:
                    stale.append(i)  # expired record: drop its index entries lazily
                elif len(records) < limit:
                    records.append(rec)
                else:
                    return records, records[-1].id
                cursor = i
            if stale:
                self._prune(owner, stale)
            if len(ids) <= limit and not stale:
                return records, None
        return records, records[-1].id if records else None

    def _prune(self, owner: str, ids: list[str]) -> None:
        """Drop index entries of records that have expired."""
        pipe = self.r.pipeline(transaction=False)
        for index in [self.keys.owner_all(owner), *self.keys.owner_state_indexes(owner),
                      *self.keys.state_indexes()]:
            pipe.zrem(index, *ids)
        pipe.execute()

    def active_count(self, owner: str) -> int:
        """Queued plus running jobs of one owner (for quotas)."""
        pipe = self.r.pipeline(transaction=False)
        pipe.zcard(self.keys.owner_state(owner, "queued"))
        pipe.zcard(self.keys.owner_state(owner, "running"))
        return sum(pipe.execute())

    def queue_counts(self) -> dict[str, int]:
        pipe = self.r.pipeline(transaction=False)
        for s in STATES:
            pipe.zcard(self.keys.index_state(s))
        return dict(zip(STATES, pipe.execute()))

    def oldest_queued_age(self) -> Optional[float]:
        """Seconds the oldest queued job has waited (None when nothing is queued)."""
        first = self.r.zrangebylex(self.keys.index_state("queued"), "-", "+", start=0, num=1)
        return time.time() - created_at(_s(first[0])) if first else None

    # ---- worker side ----------------------------------------------------
    # Leases are written and compared on Redis's clock (TIME inside the scripts), never on
    # this host's: a worker whose clock is off neither loses a live job nor keeps a dead one.
    def redis_time(self) -> float:
        seconds, micros = self.r.time()
        return seconds + micros / 1e6

    def claim(self, job_id: str) -> tuple[str, int]:
        """('claimed', attempt) when this caller now runs the job, else (state, 0)."""
        status, attempt = self._claim(
            keys=self._script_keys(job_id),
            args=[job_id, self.settings.lease_seconds, self.settings.max_attempts])
        return _s(status), int(attempt)

    def heartbeat(self, job_id: str, attempt: int, progress: Optional[float]) -> int:
        """Extend the lease. Returns -1 if fenced out, 1 if cancel requested, else 0."""
        return int(self._heartbeat(
            keys=[self.keys.job(job_id)],
            args=[job_id, attempt, self.settings.lease_seconds,
                  "" if progress is None else f"{progress:.4f}"]))

    def finish(self, job_id: str, attempt: int, state: str, outcome: str, message: str,
               summary: dict, blob: Optional[bytes], progress: Optional[float] = None) -> bool:
        """Write the terminal state (and result) if ``attempt`` is still current.

        ``progress``: the fraction of the span the run reached (kept for a failed or
        cancelled job; a succeeded one is at 1); None keeps the last heartbeat's."""
        assert state in TERMINAL
        return bool(self._finish(
            keys=self._script_keys(job_id, self.keys.result(job_id), self.keys.live(job_id)),
            args=[job_id, attempt, state, outcome, message,
                  json.dumps(summary, allow_nan=False), self.settings.result_ttl_seconds,
                  "1" if blob is not None else "0", blob if blob is not None else b"",
                  "" if progress is None else f"{min(max(progress, 0.0), 1.0):.4f}"]))

    def write_live(self, job_id: str, attempt: int, blob: bytes) -> bool:
        """Store a running attempt's partial result (only while that attempt is current)."""
        return bool(self._live(keys=[self.keys.job(job_id), self.keys.live(job_id)],
                               args=[attempt, self.settings.result_ttl_seconds, blob]))

    def expired_running(self) -> list[str]:
        """Ids of running jobs whose lease has expired (candidates for requeue)."""
        ids = [_s(i) for i in self.r.zrange(self.keys.index_state("running"), 0, -1)]
        if not ids:
            return []
        pipe = self.r.pipeline(transaction=False)
        pipe.time()
        for i in ids:
            pipe.hget(self.keys.job(i), "lease")
        (seconds, micros), *leases = pipe.execute()
        now = seconds + micros / 1e6
        return [i for i, lease in zip(ids, leases) if lease is not None and float(lease) < now]

    def requeue(self, job_id: str) -> int:
        """1: back to queued (publish it again); 2: was cancelling, now cancelled; 0: no-op."""
        return int(self._requeue(keys=self._script_keys(job_id), args=[job_id]))

    def queue_head(self, look: int = 10) -> tuple[Optional[str], Optional[float]]:
        """(job id, publication time) of the oldest message in the broker's list.

        (None, None) when the list is empty; ('', None) when none of the ``look`` oldest
        messages names a job (foreign or malformed messages: the caller waits for them to go).
        """
        raw = self.r.lrange(self.settings.interactive_queue, -look, -1)
        if not raw:
            return None, None
        for message in reversed(raw):  # Celery pushes on the left and pops on the right
            job_id = job_id_of(message)
            if job_id is not None:
                published = self.r.hget(self.keys.job(job_id), "published")
                return job_id, float(published) if published else created_at(job_id)
        return "", None

    def stranded_queued(self, grace: float, limit: int = 500) -> list[str]:
        """Queued jobs whose broker message is gone: republish them (each is returned once).

        The broker's list is first in, first out, so a queued job published before the
        oldest message still in the list no longer has its message there: a worker took it
        (and claims it within milliseconds) or it was lost (prefetched by a worker that was
        then killed, or a broker crash). A job seen so on two sweeps ``grace`` seconds apart
        is returned and stamped as published now. This works whatever the queue's length:
        only jobs created before the head message's job are read (a few: requeued and
        stranded ones), at most ``limit`` per call. A publish that failed after create is
        found once the queue has moved past where its message would have been.
        """
        head_id, head_published = self.queue_head()
        if head_id == "":
            return []
        upper = f"({head_id}" if head_id else "+"
        ids = [_s(i) for i in self.r.zrangebylex(self.keys.index_state("queued"), "-", upper,
                                                 start=0, num=limit)]
        if not ids:
            return []
        head = "" if head_published is None else repr(head_published)
        pipe = self.r.pipeline(transaction=False)
        for i in ids:
            self._stranded(keys=[self.keys.job(i)], args=[head, grace, repr(created_at(i))], client=pipe)
        return [i for i, republish in zip(ids, pipe.execute()) if int(republish) == 1]

    def worker_beat(self, name: str, info: dict, ttl: int = 30) -> None:
        self.r.set(self.keys.worker(name), json.dumps(info), ex=ttl)

    def workers(self) -> list[dict]:
        names = list(self.r.scan_iter(match=self.keys.worker_pattern(), count=100))
        if not names:
            return []
        return [json.loads(v) for v in self.r.mget(names) if v is not None]
