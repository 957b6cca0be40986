"""Service figures through the full stack: gunicorn API + Celery worker + Redis.

Reuses the test harness (tests/conftest.py RedisServer, tests/stack.py Stack):
real processes, real HTTP. Figures:

- throughput: small jobs submitted at once, jobs finished per second (warm worker);
- latency: one job at a time, submit-to-result seconds (p50, p99), polling with ETags;
- unchanged poll: GET /v1/jobs/<id> with If-None-Match answered 304 - requests per
  second from one client, and Redis commands per poll from INFO commandstats before
  and after (minus an idle window of the same length, which holds the worker's own
  heartbeat and queue polling).
"""
from __future__ import annotations

import json
import os
import statistics
import time

from bench.problems import MODELS

JOB = {
    "label": "benchmark: Robertson, short span",
    "model": json.loads((MODELS / "robertson.json").read_text()),
    "span": [0.0, 100.0], "output": {"count": 11},
    "tolerance": {"rtol": 1e-6, "atol": 1e-10}, "method": "auto",
}
DONE = ("succeeded", "failed", "cancelled")


def _commands(r) -> dict:
    return {k: v["calls"] for k, v in r.info("commandstats").items()}


def _delta(after: dict, before: dict) -> dict:
    return {k: after[k] - before.get(k, 0) for k in after if after[k] - before.get(k, 0)}


def _wait_all(session, base, ids, timeout):
    """Poll each unfinished job with its ETag until all are done; time of the last finish."""
    etags, pending = {}, set(ids)
    deadline = time.perf_counter() + timeout
    while pending and time.perf_counter() < deadline:
        for jid in list(pending):
            h = {"If-None-Match": etags[jid]} if jid in etags else {}
            resp = session.get(f"{base}/v1/jobs/{jid}", headers=h, timeout=10)
            if resp.status_code == 200:
                etags[jid] = resp.headers.get("ETag", "")
                if resp.json()["state"] in DONE:
                    pending.discard(jid)
        time.sleep(0.01)
    return time.perf_counter(), len(pending)


def throughput(session, base, jobs: int) -> dict:
    started = time.perf_counter()
    ids = [session.post(base + "/v1/jobs", json=JOB, timeout=10).json()["id"] for _ in range(jobs)]
    submitted = time.perf_counter()
    end, left = _wait_all(session, base, ids, timeout=300)
    return {"jobs": jobs, "unfinished": left, "submit_seconds": submitted - started,
            "seconds": end - started, "jobs_per_second": (jobs - left) / (end - started)}


def latency(session, base, jobs: int, poll: float = 0.005) -> dict:
    lat = []
    for _ in range(jobs):
        t0 = time.perf_counter()
        jid = session.post(base + "/v1/jobs", json=JOB, timeout=10).json()["id"]
        etag = None
        while True:
            h = {"If-None-Match": etag} if etag else {}
            resp = session.get(f"{base}/v1/jobs/{jid}", headers=h, timeout=10)
            if resp.status_code == 200:
                etag = resp.headers.get("ETag")
                if resp.json()["state"] in DONE:
                    break
            time.sleep(poll)
        session.get(f"{base}/v1/jobs/{jid}/result", timeout=10)
        lat.append(time.perf_counter() - t0)
    lat.sort()
    p99 = lat[min(len(lat) - 1, int(round(0.99 * (len(lat) - 1))))]
    return {"jobs": jobs, "p50_seconds": statistics.median(lat), "p99_seconds": p99,
            "max_seconds": lat[-1], "poll_interval_seconds": poll}


def unchanged_polls(session, base, r, seconds: float) -> dict:
    jid = session.post(base + "/v1/jobs", json=JOB, timeout=10).json()["id"]
    _wait_all(session, base, [jid], timeout=60)
    etag = session.get(f"{base}/v1/jobs/{jid}", timeout=10).headers["ETag"]
    b0 = _commands(r)
    time.sleep(seconds)  # idle window: background commands of worker and API
    b1 = _commands(r)
    idle = _delta(b1, b0)
    n, codes = 0, set()
    t0 = time.perf_counter()
    while time.perf_counter() - t0 < seconds:
        codes.add(session.get(f"{base}/v1/jobs/{jid}", headers={"If-None-Match": etag},
                              timeout=10).status_code)
        n += 1
    busy = time.perf_counter() - t0
    b2 = _commands(r)
    during = _delta(b2, b1)
    extra = {k: (v - idle.get(k, 0) * busy / seconds) / n for k, v in during.items()}
    extra.pop("cmdstat_info", None)
    per_poll = {k[len("cmdstat_"):]: round(v, 3) for k, v in extra.items() if v > 0.01}
    return {"polls": n, "status_codes": sorted(codes), "requests_per_second": n / busy,
            "redis_commands_per_poll": round(sum(per_poll.values()), 3),
            "by_command": per_poll, "client": "one thread, keep-alive session"}


def run(quick: bool, log=print) -> dict:
    """All service figures; a stack that cannot start is reported as unavailable."""
    try:
        import redis
        import requests
        from tests.conftest import RedisServer
        try:
            from tests.stack import Stack
        except ImportError:  # older layout of the test harness
            from tests.e2e.conftest import Stack
    except Exception as exc:  # the service's test harness is not importable here
        return {"status": "unavailable", "message": f"{type(exc).__name__}: {exc}"}
    os.environ.setdefault("STIFFLANE_RATE_LIMIT", "100000000")  # the benchmark is one busy owner
    server = stack = None
    try:
        server = RedisServer()
        stack = Stack(server.url)
        session = requests.Session()
        warm = session.post(stack.base + "/v1/jobs", json=JOB, timeout=10).json()["id"]
        _wait_all(session, stack.base, [warm], timeout=120)
        out = {"status": "ok", "worker_concurrency": 1, "api": "gunicorn, 1 process x 4 threads",
               "job": "Robertson [0, 100], 11 outputs, rtol 1e-6, auto"}
        out["throughput"] = throughput(session, stack.base, 20 if quick else 200)
        log(f"service throughput: {out['throughput']}")
        out["latency"] = latency(session, stack.base, 10 if quick else 100)
        log(f"service latency: {out['latency']}")
        out["poll_304"] = unchanged_polls(session, stack.base, redis.Redis.from_url(server.url),
                                          2.0 if quick else 5.0)
        log(f"service 304 polls: {out['poll_304']}")
        return out
    except Exception as exc:  # a broken stack is a figure too: say why
        return {"status": "failed", "message": f"{type(exc).__name__}: {exc}"}
    finally:
        if stack:
            stack.stop()
        if server:
            server.stop()
