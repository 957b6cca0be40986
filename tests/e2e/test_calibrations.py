"""Calibrations on real processes: gunicorn API behind nginx, a Celery worker, Redis."""
import copy
import json
import time

import pytest
import redis
import requests

from tests.conftest import example_path
from tests.service.calibration_specs import K_TRUE, decay_spec

pytestmark = pytest.mark.e2e

EXAMPLE = json.loads(example_path("calibrations", "tarnwhistle_isomerisation.json").read_text())
TERMINAL = ("succeeded", "failed", "cancelled")


def submit(stack, body, **kw) -> str:
    r = requests.post(stack.base + "/v1/calibrations", json=body, timeout=30, **kw)
    assert r.status_code == 202, r.text
    return r.json()["id"]


def view(stack, cal_id) -> dict:
    return requests.get(f"{stack.base}/v1/calibrations/{cal_id}", timeout=10).json()


def wait(stack, cal_id, timeout=120.0, until=lambda v: v["state"] in TERMINAL):
    deadline = time.time() + timeout
    while time.time() < deadline:
        v = view(stack, cal_id)
        if until(v):
            return v
        time.sleep(0.05)
    raise AssertionError(f"calibration {cal_id} still {v['state']} {v['progress']} after {timeout} s")


def writes(stack, cal_id) -> int:
    r = redis.Redis.from_url(stack.env["REDIS_URL"])
    return int(r.hget(f"{stack.env['STIFFLANE_KEY_PREFIX']}:calibration:{cal_id}", "writes"))


def test_the_closed_form_decay_is_recovered_through_the_stack(stack):
    cal_id = submit(stack, decay_spec())
    v = wait(stack, cal_id)
    assert v["state"] == "succeeded", v
    res = requests.get(f"{stack.base}/v1/calibrations/{cal_id}/result", timeout=10).json()
    assert res["unknowns"][0]["estimate"] == pytest.approx(K_TRUE, rel=1e-6)
    assert writes(stack, cal_id) == v["chunks"] + 1


def test_the_example_runs_end_to_end_and_finds_its_invented_rate_constants(stack, capsys):
    """Invented data from k1 = 0.42, k2 = 0.13 per hour with 2 % noise; 20 starts."""
    began = time.perf_counter()
    cal_id = submit(stack, EXAMPLE)
    v = wait(stack, cal_id, timeout=300)
    seconds = time.perf_counter() - began
    assert v["state"] == "succeeded", v
    assert v["data"]["skipped_cells"] == 2 and v["progress"]["done"] + v["progress"]["failed"] == 20
    res = requests.get(f"{stack.base}/v1/calibrations/{cal_id}/result", timeout=10).json()
    est = {u["name"]: u for u in res["unknowns"]}
    assert est["k1"]["estimate"] == pytest.approx(0.42, rel=0.1) and est["k2"]["estimate"] == pytest.approx(0.13, rel=0.1)
    for u in est.values():
        assert u["ci95"][0] < u["estimate"] < u["ci95"][1]
    table = requests.get(f"{stack.base}/v1/calibrations/{cal_id}/result?format=csv", timeout=10)
    assert table.status_code == 200 and table.text.startswith("# caution:")
    with capsys.disabled():
        print(f"\nexample calibration (20 starts, 1 worker process): {seconds:.2f} s end to end; "
              f"k1 = {est['k1']['estimate']:.4g}, k2 = {est['k2']['estimate']:.4g}")


def test_cancel_through_the_stack_ends_the_calibration(stack):
    spec = copy.deepcopy(EXAMPLE)
    spec["starts"] = 200
    cal_id = submit(stack, spec)
    wait(stack, cal_id, until=lambda v: v["progress"]["done"] + v["progress"]["failed"] >= 2)
    r = requests.post(f"{stack.base}/v1/calibrations/{cal_id}/cancel", timeout=10)
    assert r.status_code == 202
    v = wait(stack, cal_id, timeout=60)
    p = v["progress"]
    assert v["state"] == "cancelled" and 0 < p["cancelled"] < 200
    assert p["done"] + p["failed"] + p["cancelled"] == 200
    assert requests.get(f"{stack.base}/v1/calibrations/{cal_id}/result", timeout=10).status_code == 409


def test_kill_9_of_the_worker_mid_calibration_loses_no_start_and_counts_none_twice(stack):
    spec = copy.deepcopy(EXAMPLE)
    spec["starts"] = 40
    cal_id = submit(stack, spec)
    wait(stack, cal_id, until=lambda v: v["progress"]["done"] + v["progress"]["failed"] >= 4)
    stack.kill_worker()
    mid = view(stack, cal_id)
    assert mid["state"] == "running", "the calibration ended before the kill"
    stack.start_worker()
    v = wait(stack, cal_id, timeout=300)
    assert v["state"] == "succeeded", v
    p = v["progress"]
    assert (p["done"] + p["failed"], p["lost"], p["cancelled"]) == (40, 0, 0)
    res = requests.get(f"{stack.base}/v1/calibrations/{cal_id}/result", timeout=10).json()
    assert sorted(s["index"] for s in res["starts"]) == list(range(40))  # every start once, none twice
    assert writes(stack, cal_id) == v["chunks"] + 1  # one write per chunk and one for the summary


def test_a_50_mb_upload_is_refused_at_the_front_with_a_problem(stack):
    body = b'{"experiments": [{"csv": "' + b"0," * (25 * 2 ** 20) + b'"}]}'
    r = requests.post(stack.base + "/v1/calibrations", data=body, timeout=60,
                      headers={"Content-Type": "application/json"})
    assert r.status_code == 413 and r.headers["Content-Type"].startswith("application/problem+json")
    assert r.json()["limit_bytes"] > 0
