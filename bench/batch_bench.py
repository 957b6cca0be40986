"""Sweep throughput end to end: submit a Robertson batch, wait for the complete table.

Starts its own Redis, API (gunicorn) and worker (Celery, one process per core on
both queues), then measures:

- submit latency and members per second from submit to complete table;
- the baseline: SciPy ``solve_ivp`` LSODA in a loop, same problem and tolerances,
  one process (solves per second per core);
- Redis memory of a finished batch (INFO memory used_memory, before and after);
- interactive latency: jobs submitted while a batch drains, created -> started (p50, p95).

Run: ``PYTHONPATH=. python -m bench.batch_bench [--members 10000] [--memory-members 100000]``.
Figures are printed as JSON (timings, not assertions).
"""
from __future__ import annotations

import argparse
import json
import os
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from datetime import datetime
from pathlib import Path

import numpy as np
import redis
import requests

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from cli.main import _env, api_command, worker_command  # noqa: E402
from cli.redis_server import redis_binary  # noqa: E402

ROBERTSON = json.loads((ROOT / "examples" / "models" / "robertson.json").read_text())
SPAN, RTOL, ATOL = (0.0, 40.0), 1e-6, 1e-10
SUMMARIES = [{"kind": "final", "of": "y1"}, {"kind": "final", "of": "y3"},
             {"kind": "max", "of": "y2"},  # two columns: value and time
             {"kind": "crossing", "of": "y1", "level": 0.9, "when": "below"}]


def batch_body(members: int, seed: int = 1) -> dict:
    return {"label": f"Robertson LHS x{members} (bench)",
            "base": {"model": ROBERTSON, "span": list(SPAN), "output": {"count": 2},
                     "tolerance": {"rtol": RTOL, "atol": ATOL}, "nonnegative": True},
            "sample": {"count": members, "seed": seed, "method": "latin_hypercube",
                       "parameters": {"k1": {"distribution": "log_uniform", "low": 0.02, "high": 0.08},
                                      "k2": {"distribution": "log_uniform", "low": 1e7, "high": 9e7},
                                      "k3": {"distribution": "log_uniform", "low": 5e3, "high": 2e4}}},
            "summaries": SUMMARIES, "summary_grid": {"count": 201}}


class Stack:
    def __init__(self, workers: int):
        self.dir = tempfile.mkdtemp(prefix="stifflane-bench-")
        self.redis_port, self.api_port = _free_port(), _free_port()
        self.procs = [subprocess.Popen(
            [redis_binary(), "--port", str(self.redis_port), "--bind", "127.0.0.1", "--dir", self.dir,
             "--save", "", "--appendonly", "yes", "--appendfsync", "everysec",
             "--maxmemory-policy", "noeviction", "--loglevel", "warning"], stdout=subprocess.DEVNULL)]
        self.url = f"redis://127.0.0.1:{self.redis_port}/0"
        self.r = redis.Redis.from_url(self.url)
        _until(lambda: self.r.ping(), 10, "redis")
        env = _env(self.url) | {"STIFFLANE_AUTH_MODE": "off", "STIFFLANE_RATE_LIMIT": "100000"}
        self.base = f"http://127.0.0.1:{self.api_port}"
        log = open(Path(self.dir) / "stack.log", "ab")
        kw = dict(env=env, cwd=ROOT, stdout=log, stderr=subprocess.STDOUT, start_new_session=True)
        self.procs.append(subprocess.Popen(api_command("127.0.0.1", self.api_port, workers=1), **kw))
        _until(lambda: requests.get(self.base + "/v1/health", timeout=2).status_code == 200, 30, "api")
        queues = "stifflane.jobs,stifflane.batches"
        self.procs.append(subprocess.Popen(worker_command(workers, queues), **kw))
        _until(lambda: requests.get(self.base + "/v1/health", timeout=2).json()["workers"], 60, "worker")

    def stop(self):
        for p in reversed(self.procs):
            try:
                os.killpg(p.pid, signal.SIGTERM) if p is not self.procs[0] else p.terminate()
                p.wait(15)
            except Exception:
                p.kill()
        shutil.rmtree(self.dir, ignore_errors=True)

    def used_memory(self) -> int:
        return int(self.r.info("memory")["used_memory"])

    def run_batch(self, members: int, seed: int) -> dict:
        t0 = time.perf_counter()
        r = requests.post(self.base + "/v1/batches", json=batch_body(members, seed), timeout=60)
        submit = time.perf_counter() - t0
        assert r.status_code == 202, r.text
        batch_id = r.json()["id"]
        view = self.wait(batch_id)
        t1 = time.perf_counter()
        table = requests.get(f"{self.base}/v1/batches/{batch_id}/table?format=npz", timeout=300)
        t2 = time.perf_counter()
        p = view["progress"]
        return {"batch_id": batch_id, "members": members, "submit_seconds": round(submit, 3),
                "submit_to_complete_seconds": round(t1 - t0, 2),
                "members_per_second": round(members / (t1 - t0), 1),
                "table_npz_seconds": round(t2 - t1, 2), "table_bytes": len(table.content),
                "succeeded": p["succeeded"], "failed": p["failed"], "chunks": view["chunks"],
                "chunk_size": view["chunk_size"]}

    def wait(self, batch_id: str, timeout: float = 3600) -> dict:
        deadline = time.time() + timeout
        while time.time() < deadline:
            v = requests.get(f"{self.base}/v1/batches/{batch_id}", timeout=10).json()
            if v["state"] in ("succeeded", "cancelled"):
                return v
            time.sleep(0.05)
        raise RuntimeError(f"batch {batch_id} did not finish")


def _free_port() -> int:
    import socket

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _until(check, seconds: float, what: str):
    deadline = time.time() + seconds
    while time.time() < deadline:
        try:
            if check():
                return
        except Exception:
            pass
        time.sleep(0.1)
    raise RuntimeError(f"{what} did not start")


def scipy_baseline(members: int = 200) -> dict:
    """SciPy solve_ivp LSODA, one member after another, one process."""
    from scipy.integrate import solve_ivp

    rng = np.random.Generator(np.random.PCG64(3))
    k1s = np.exp(rng.uniform(np.log(0.02), np.log(0.08), members))

    def run(k1, k2=3e7, k3=1e4):
        f = lambda t, y: [-k1 * y[0] + k3 * y[1] * y[2], k1 * y[0] - k2 * y[1] ** 2 - k3 * y[1] * y[2],  # noqa: E731
                          k2 * y[1] ** 2]
        return solve_ivp(f, SPAN, [1.0, 0.0, 0.0], method="LSODA", rtol=RTOL, atol=ATOL,
                         t_eval=np.linspace(*SPAN, 201))

    run(0.04)
    t0 = time.perf_counter()
    for k1 in k1s:
        run(k1)
    secs = time.perf_counter() - t0
    return {"members": members, "seconds": round(secs, 2), "solves_per_second_per_core": round(members / secs, 1)}


def interactive_latency(stack: Stack, batch_members: int, jobs: int = 20) -> dict:
    """Jobs submitted one by one while a batch drains: seconds from created to started."""
    job = {"model": ROBERTSON, "span": list(SPAN), "output": {"count": 11}}
    r = requests.post(stack.base + "/v1/batches", json=batch_body(batch_members, 7), timeout=60)
    batch_id = r.json()["id"]
    time.sleep(1.0)
    waits = []
    for _ in range(jobs):
        jid = requests.post(stack.base + "/v1/jobs", json=job, timeout=10).json()["id"]
        while True:
            v = requests.get(f"{stack.base}/v1/jobs/{jid}", timeout=10).json()
            if v["started_at"]:
                break
            time.sleep(0.02)
        waits.append((_ts(v["started_at"]) - _ts(v["created_at"])))
        time.sleep(0.2)
    still = requests.get(f"{stack.base}/v1/batches/{batch_id}", timeout=10).json()
    stack.wait(batch_id)
    return {"jobs": jobs, "p50_seconds": round(float(np.percentile(waits, 50)), 3),
            "p95_seconds": round(float(np.percentile(waits, 95)), 3), "max_seconds": round(max(waits), 3),
            "batch_still_running_after_jobs": still["state"] == "running"}


def _ts(iso: str) -> float:
    return datetime.fromisoformat(iso.replace("Z", "+00:00")).timestamp()


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--members", type=int, default=10_000)
    ap.add_argument("--memory-members", type=int, default=100_000)
    ap.add_argument("--workers", type=int, default=os.cpu_count() or 2)
    args = ap.parse_args()
    out = {"machine_cores": os.cpu_count(), "workers": args.workers,
           "problem": f"Robertson, span {list(SPAN)}, rtol {RTOL}, atol {ATOL}, 5 summary columns + 1"}
    out["scipy_lsoda_baseline"] = scipy_baseline()
    stack = Stack(args.workers)
    try:
        stack.run_batch(200, seed=99)  # warm every worker process (kernels, plan caches)
        out["throughput"] = stack.run_batch(args.members, seed=1)
        out["interactive_latency_while_batch_runs"] = interactive_latency(stack, max(args.members, 5000))
        if args.memory_members:
            before = stack.used_memory()
            run = stack.run_batch(args.memory_members, seed=2)
            after = stack.used_memory()
            out["memory"] = {"members": args.memory_members, "redis_used_memory_delta_mb":
                             round((after - before) / 2 ** 20, 2), "run": run}
    finally:
        stack.stop()
    print(json.dumps(out, indent=2))


if __name__ == "__main__":
    main()
