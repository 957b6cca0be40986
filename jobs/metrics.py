"""Operations metrics kept in Redis, so every process (gunicorn workers, Celery children,
workers on other hosts) adds to one truth and any API process can answer a scrape.

Workers record when a job or chunk finishes (:func:`job_finished`, :func:`chunk_finished`):
counters and fixed-bucket histograms in a few bounded hashes (jobs/keys.py). A scrape reads
them and the live gauges (jobs by state, queue lengths) in one pipelined round trip
(:func:`snapshot`); service/metrics.py turns that into the Prometheus text format.

Recording never fails a job: a Redis error here is logged and the figure is lost.
"""
from __future__ import annotations

import logging
import re
import time
from dataclasses import dataclass

import redis

from jobs.keys import STATES, Keys, created_at

log = logging.getLogger(__name__)

# Bucket upper bounds in seconds (Prometheus' le); the last bucket, +Inf, is implicit.
SOLVE_BUCKETS = (0.01, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0, 30.0, 60.0, 300.0, 900.0, 3600.0)
WAIT_BUCKETS = (0.01, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0, 30.0, 60.0, 300.0, 900.0, 3600.0)
HISTOGRAMS = {"job_solve_seconds": SOLVE_BUCKETS, "job_wait_seconds": WAIT_BUCKETS}
_LABEL = re.compile(r"^[a-z][a-z0-9_]{0,39}$")


def _label(value) -> str:
    """A label value from a fixed vocabulary; anything else is 'other' (the hash stays bounded)."""
    text = value.decode() if isinstance(value, bytes) else str(value or "none")
    return text if _LABEL.match(text) else "other"


def _observe(pipe, keys: Keys, name: str, seconds: float) -> None:
    buckets = HISTOGRAMS[name]
    index = next((i for i, le in enumerate(buckets) if seconds <= le), len(buckets))
    key = keys.metrics_histogram(name)
    pipe.hincrby(key, f"b{index}", 1)
    pipe.hincrbyfloat(key, "sum", seconds)
    pipe.hincrby(key, "count", 1)


def job_finished(client: redis.Redis, keys: Keys, job_id: str) -> None:
    """Count a job that a worker has just finished (call once, after a successful finish)."""
    try:
        state, outcome, started, finished = client.hmget(keys.job(job_id), "state", "outcome",
                                                         "started", "finished")
        pipe = client.pipeline(transaction=False)
        pipe.hincrby(keys.metrics_counts(), f"job:{_label(state)}:{_label(outcome)}", 1)
        if started is not None:
            started = float(started)
            _observe(pipe, keys, "job_wait_seconds", max(started - created_at(job_id), 0.0))
            end = float(finished) if finished is not None else time.time()
            _observe(pipe, keys, "job_solve_seconds", max(end - started, 0.0))
        pipe.execute()
    except (redis.RedisError, ValueError) as e:
        log.warning("metrics for job %s not recorded: %s", job_id, e)


def chunk_finished(client: redis.Redis, keys: Keys, outcomes: list[str]) -> None:
    """Count the members of a batch chunk that a worker has just finished, by outcome."""
    try:
        tally: dict[str, int] = {}
        for outcome in outcomes:
            label = _label(outcome)
            tally[label] = tally.get(label, 0) + 1
        pipe = client.pipeline(transaction=False)
        for label, n in tally.items():
            pipe.hincrby(keys.metrics_counts(), f"member:{label}", n)
        pipe.hincrby(keys.metrics_counts(), "chunk:done", 1)
        pipe.execute()
    except redis.RedisError as e:
        log.warning("metrics for a batch chunk not recorded: %s", e)


@dataclass
class Histogram:
    buckets: tuple[float, ...]
    counts: list[int]      # per bucket (not cumulative), the last one for +Inf
    sum: float
    count: int

    def cumulative(self) -> list[tuple[str, int]]:
        out, total = [], 0
        for le, n in zip([*map(str, self.buckets), "+Inf"], self.counts):
            total += n
            out.append((le, total))
        return out


@dataclass
class Snapshot:
    jobs_by_state: dict[str, int]
    queues: dict[str, int]              # queue name -> messages waiting in the broker
    oldest_queued_seconds: float
    batches_active: int
    jobs_finished: dict[tuple[str, str], int]   # (state, outcome) -> count
    members_finished: dict[str, int]            # outcome -> count
    chunks_finished: int
    histograms: dict[str, Histogram]


def snapshot(client: redis.Redis, keys: Keys, queues: list[str]) -> Snapshot:
    """Everything a scrape reports, in one pipelined round trip (O(1) commands per figure)."""
    pipe = client.pipeline(transaction=False)
    for state in STATES:
        pipe.zcard(keys.index_state(state))
    for queue in queues:
        pipe.llen(queue)
    pipe.zrangebylex(keys.index_state("queued"), "-", "+", start=0, num=1)
    pipe.zcard(keys.batches_active())
    pipe.hgetall(keys.metrics_counts())
    for name in HISTOGRAMS:
        pipe.hgetall(keys.metrics_histogram(name))
    replies = pipe.execute()
    n = len(STATES)
    by_state = dict(zip(STATES, replies[:n]))
    depth = dict(zip(queues, replies[n:n + len(queues)]))
    oldest, active, counts = replies[n + len(queues):n + len(queues) + 3]
    hist_replies = replies[n + len(queues) + 3:]
    first = oldest[0].decode() if oldest else None
    jobs, members, chunks = {}, {}, 0
    for field, value in counts.items():
        kind, _, rest = field.decode().partition(":")
        if kind == "job":
            state, _, outcome = rest.partition(":")
            jobs[(state, outcome)] = int(value)
        elif kind == "member":
            members[rest] = int(value)
        elif kind == "chunk":
            chunks = int(value)
    histograms = {}
    for (name, buckets), raw in zip(HISTOGRAMS.items(), hist_replies):
        raw = {k.decode(): v for k, v in raw.items()}
        histograms[name] = Histogram(buckets, [int(raw.get(f"b{i}", 0)) for i in range(len(buckets) + 1)],
                                     float(raw.get("sum", 0.0)), int(raw.get("count", 0)))
    return Snapshot(by_state, depth, max(time.time() - created_at(first), 0.0) if first else 0.0,
                    int(active), jobs, members, chunks, histograms)
