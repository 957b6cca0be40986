"""The Redis keyspace: every key the project writes is named here and only here.

| key                          | type   | holds                                   | TTL            |
|------------------------------|--------|-----------------------------------------|----------------|
| {p}:job:{id}                 | hash   | job record (state, rev, times, spec...) | result TTL     |
| {p}:result:{id}              | string | compressed result blob (jobs/blob.py)   | result TTL     |
| {p}:live:{id}                | string | running job's partial result (blob, rows thinned), rewritten every ~2 s; deleted at finish | result TTL |
| {p}:index:state:{state}      | zset   | job ids by state (all owners)           | pruned lazily  |
| {p}:owner:{o}:all            | zset   | one owner's job ids                     | pruned lazily  |
| {p}:owner:{o}:state:{state}  | zset   | one owner's job ids by state            | pruned lazily  |
| {p}:apikey:{digest}          | hash   | API key record: owner, role, id, created| none (revoked = deleted) |
| {p}:apikeys                  | hash   | key id -> digest (for list and revoke)  | none           |
| {p}:idem:{o}:{key}           | hash   | Idempotency-Key: body fingerprint, reply| 24 h           |
| {p}:rate:{o}:{window}        | string | request count in a rate window          | 2 windows      |
| {p}:worker:{name}            | string | worker heartbeat (health endpoint)      | 30 s           |
| {p}:batch:{id}               | hash   | batch record: state, counts, spec, design | result TTL   |
| {p}:batch:{id}:chunks        | hash   | chunk states s<i> and attempts a<i>     | result TTL     |
| {p}:batch:{id}:leases        | zset   | running chunk -> lease expiry           | deleted when settled |
| {p}:batch:{id}:result:{i}    | string | chunk result blob (jobs/blob.py)        | result TTL     |
| {p}:batches:owner:{o}        | zset   | one owner's batch ids                   | pruned lazily  |
| {p}:batches:active           | zset   | batch ids not yet settled (reconciler)  | none           |
| {p}:batches:active_owners    | hash   | owner -> number of unsettled batches    | none           |
| {p}:calibration:{id}         | hash   | calibration record: state, stage, counts, best so far, spec | result TTL |
| {p}:calibration:{id}:chunks  | hash   | chunk states s<i> and attempts a<i> (i = n_chunks: the summary) | result TTL |
| {p}:calibration:{id}:leases  | zset   | running chunk -> lease expiry; w<i> -> republication time | deleted when settled |
| {p}:calibration:{id}:starts:{i} | string | one chunk's start outcomes (zlib JSON) | result TTL |
| {p}:calibration:{id}:estimate | string | the estimate (zlib JSON)              | result TTL     |
| {p}:calibrations:owner:{o}   | zset   | one owner's calibration ids             | pruned lazily  |
| {p}:calibrations:active      | zset   | calibration ids not yet settled (reconciler) | none      |
| {p}:calibrations:active_owners | hash | owner -> number of unsettled calibrations | none          |
| {p}:metrics:counts           | hash   | counters: jobs finished by state/outcome, batch members by outcome (jobs/metrics.py) | none: bounded (fixed vocabularies) |
| {p}:metrics:hist:{name}      | hash   | one histogram: a count per fixed bucket, sum, count | none: bounded (fixed buckets) |

Job ids sort by creation time (hex microseconds first), so the indexes are
lexicographic sorted sets with score 0 and pagination is ZRANGEBYLEX.
"""
from __future__ import annotations

import os
import re
import threading
import time

STATES = ("queued", "running", "succeeded", "failed", "cancelled")
TERMINAL = ("succeeded", "failed", "cancelled")

_ID_RE = re.compile(r"^[0-9a-f]{28}$")


_last_us = 0
_id_lock = threading.Lock()


def new_job_id(now: float | None = None) -> str:
    """28 hex chars: 14 of creation microseconds (strictly increasing within a
    process), 14 random. Sorts by creation time."""
    global _last_us
    with _id_lock:
        us = max(int((time.time() if now is None else now) * 1e6), _last_us + 1)
        _last_us = us
    return f"{us:014x}{os.urandom(7).hex()}"


def created_at(job_id: str) -> float:
    """Creation time (epoch seconds) encoded in a job id."""
    return int(job_id[:14], 16) / 1e6


def is_job_id(text: str) -> bool:
    return bool(_ID_RE.match(text))


class Keys:
    def __init__(self, prefix: str = "sl"):
        self.prefix = prefix

    def job(self, job_id: str) -> str:
        return f"{self.prefix}:job:{job_id}"

    def result(self, job_id: str) -> str:
        return f"{self.prefix}:result:{job_id}"

    def live(self, job_id: str) -> str:
        """A running job's latest partial result (worker.run_job.LiveResult writes it)."""
        return f"{self.prefix}:live:{job_id}"

    def owner_all(self, owner: str) -> str:
        return f"{self.prefix}:owner:{owner}:all"

    def owner_state(self, owner: str, state: str) -> str:
        return f"{self.prefix}:owner:{owner}:state:{state}"

    def owner_state_indexes(self, owner: str) -> list[str]:
        return [self.owner_state(owner, s) for s in STATES]

    def api_key(self, digest: str) -> str:
        return f"{self.prefix}:apikey:{digest}"

    def api_key_ids(self) -> str:
        return f"{self.prefix}:apikeys"

    def idempotency(self, owner: str, key: str) -> str:
        return f"{self.prefix}:idem:{owner}:{key}"

    def rate(self, owner: str, window: int) -> str:
        return f"{self.prefix}:rate:{owner}:{window}"

    def rate_address(self, address: str, window: int) -> str:
        """Requests without a valid key (public paths, refused keys) from one client address."""
        return f"{self.prefix}:rate-addr:{address}:{window}"

    def index_state(self, state: str) -> str:
        return f"{self.prefix}:index:state:{state}"

    def state_indexes(self) -> list[str]:
        return [self.index_state(s) for s in STATES]

    def worker(self, name: str) -> str:
        return f"{self.prefix}:worker:{name}"

    def worker_pattern(self) -> str:
        return f"{self.prefix}:worker:*"

    # ---- batches (jobs/batch_store.py)
    def batch(self, batch_id: str) -> str:
        return f"{self.prefix}:batch:{batch_id}"

    def batch_chunks(self, batch_id: str) -> str:
        return f"{self.prefix}:batch:{batch_id}:chunks"

    def batch_leases(self, batch_id: str) -> str:
        return f"{self.prefix}:batch:{batch_id}:leases"

    def batch_result(self, batch_id: str, chunk: int) -> str:
        return f"{self.prefix}:batch:{batch_id}:result:{chunk}"

    def batches_owner(self, owner: str) -> str:
        return f"{self.prefix}:batches:owner:{owner}"

    def batches_active(self) -> str:
        return f"{self.prefix}:batches:active"

    def batches_active_owners(self) -> str:
        return f"{self.prefix}:batches:active_owners"

    # ---- calibrations (jobs/calibration_store.py)
    def calibration(self, cal_id: str) -> str:
        return f"{self.prefix}:calibration:{cal_id}"

    def calibration_chunks(self, cal_id: str) -> str:
        return f"{self.prefix}:calibration:{cal_id}:chunks"

    def calibration_leases(self, cal_id: str) -> str:
        return f"{self.prefix}:calibration:{cal_id}:leases"

    def calibration_starts(self, cal_id: str, chunk: int) -> str:
        return f"{self.prefix}:calibration:{cal_id}:starts:{chunk}"

    def calibration_estimate(self, cal_id: str) -> str:
        return f"{self.prefix}:calibration:{cal_id}:estimate"

    def calibrations_owner(self, owner: str) -> str:
        return f"{self.prefix}:calibrations:owner:{owner}"

    def calibrations_active(self) -> str:
        return f"{self.prefix}:calibrations:active"

    def calibrations_active_owners(self) -> str:
        return f"{self.prefix}:calibrations:active_owners"

    # ---- operations metrics (jobs/metrics.py): bounded hashes, never per job
    def metrics_counts(self) -> str:
        return f"{self.prefix}:metrics:counts"

    def metrics_histogram(self, name: str) -> str:
        return f"{self.prefix}:metrics:hist:{name}"
