"""Batches on real processes: gunicorn API, Celery worker on both queues, Redis."""
import json
import time

import numpy as np
import pytest
import redis
import requests
from scipy.integrate import solve_ivp

from tests.conftest import example_path

pytestmark = pytest.mark.e2e

ROBERTSON = json.loads(example_path("models", "robertson.json").read_text())


def robertson_batch(count, chunk_size, seed=5):
    return {
        "label": "Robertson k1/k3 sweep (e2e)",
        "base": {"model": ROBERTSON, "span": [0.0, 40.0], "output": {"count": 3},
                 "tolerance": {"rtol": 1e-6, "atol": 1e-10}, "nonnegative": True},
        "sample": {"count": count, "seed": seed, "method": "latin_hypercube",
                   "parameters": {"k1": {"distribution": "log_uniform", "low": 0.02, "high": 0.08},
                                  "k3": {"distribution": "log_uniform", "low": 5e3, "high": 2e4}}},
        "summaries": [{"kind": "final", "of": "y1"}, {"kind": "max", "of": "y2"},
                      {"kind": "crossing", "of": "y1", "level": 0.9, "when": "below"}],
        "summary_grid": {"count": 201},
        "chunk_size": chunk_size,
    }


def robertson_scipy(k1, k2, k3, t_end):
    def f(t, y):
        return [-k1 * y[0] + k3 * y[1] * y[2], k1 * y[0] - k2 * y[1] ** 2 - k3 * y[1] * y[2], k2 * y[1] ** 2]

    sol = solve_ivp(f, (0.0, t_end), [1.0, 0.0, 0.0], method="Radau", rtol=1e-10, atol=1e-14)
    return sol.y[0, -1]


def submit(stack, body) -> str:
    r = requests.post(stack.base + "/v1/batches", json=body, timeout=30)
    assert r.status_code == 202, r.text
    return r.json()["id"]


def view(stack, batch_id) -> dict:
    return requests.get(f"{stack.base}/v1/batches/{batch_id}", timeout=10).json()


def wait(stack, batch_id, timeout=120.0, until=lambda v: v["state"] in ("succeeded", "cancelled")):
    deadline = time.time() + timeout
    while time.time() < deadline:
        v = view(stack, batch_id)
        if until(v):
            return v
        time.sleep(0.1)
    raise AssertionError(f"batch {batch_id} still {v['state']} {v['progress']} after {timeout} s")


def table(stack, batch_id) -> dict:
    return requests.get(f"{stack.base}/v1/batches/{batch_id}/table", timeout=30).json()


def test_a_sampled_robertson_batch_runs_to_a_complete_table(stack):
    batch_id = submit(stack, robertson_batch(300, 50))
    v = wait(stack, batch_id)
    assert v["state"] == "succeeded" and v["progress"]["succeeded"] == 300, v
    t = table(stack, batch_id)
    assert t["complete"] and t["columns"]["index"] == list(range(300))
    y1 = np.array(t["columns"]["summaries"]["final_y1"])
    assert np.all((y1 > 0) & (y1 < 1))
    # members against SciPy's Radau at tight tolerance (independent oracle)
    k1, k3 = (np.array(t["columns"]["values"][n]) for n in ("k1", "k3"))
    for i in (0, 150, 299):
        ref = robertson_scipy(k1[i], 3e7, k3[i], 40.0)
        assert abs(y1[i] - ref) <= 1e-4 * ref
    stats = requests.get(f"{stack.base}/v1/batches/{batch_id}/statistics", timeout=10).json()
    assert stats["summaries"]["final_y1"]["count"] == 300


def test_kill_9_of_the_worker_mid_batch_loses_no_member_and_counts_none_twice(stack):
    batch_id = submit(stack, robertson_batch(2000, 40, seed=9))
    wait(stack, batch_id, until=lambda v: v["progress"]["succeeded"] >= 200)
    stack.kill_worker()
    mid = view(stack, batch_id)
    assert mid["state"] == "running" and mid["progress"]["succeeded"] < 2000, "batch ended before the kill"
    stack.start_worker()
    v = wait(stack, batch_id, timeout=180)
    assert v["state"] == "succeeded"
    p = v["progress"]
    assert (p["succeeded"], p["failed"], p["lost"], p["cancelled"]) == (2000, 0, 0, 0)
    t = table(stack, batch_id)
    assert t["columns"]["index"] == list(range(2000))  # every member once, none twice
    r = redis.Redis.from_url(stack.env["REDIS_URL"])
    writes = int(r.hget(f"{stack.env['STIFFLANE_KEY_PREFIX']}:batch:{batch_id}", "writes"))
    assert writes == 50  # one result write per chunk, the killed attempt's included nowhere


def test_cancel_stops_a_running_batch_and_keeps_its_finished_rows(stack):
    batch_id = submit(stack, robertson_batch(3000, 40, seed=3))
    wait(stack, batch_id, until=lambda v: v["progress"]["succeeded"] >= 80)
    r = requests.post(f"{stack.base}/v1/batches/{batch_id}/cancel", timeout=10)
    assert r.status_code == 202
    v = wait(stack, batch_id, timeout=30)
    assert v["state"] == "cancelled"
    p = v["progress"]
    assert p["succeeded"] + p["cancelled"] == 3000 and 0 < p["cancelled"] < 3000
    t = table(stack, batch_id)
    assert t["columns"]["index"] == list(range(3000))
    assert t["columns"]["outcome"].count("succeeded") == p["succeeded"]
