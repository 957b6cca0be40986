"""Partial results on the live stack (nginx, gunicorn, Celery worker, Redis): a running job's
snapshot, a cancelled job's partial result, a failed job's, in every format."""
import io
import time

import numpy as np
import pytest
import requests

pytestmark = pytest.mark.e2e

# a harmonic oscillator at tight tolerance over a long span (about a minute here), output every
# 10 time units: it runs until cancelled. Oracle: u = cos t, v = -sin t (to 1e-4: the global
# error grows along the orbit, and how far the run gets depends on the machine).
LONG = {
    "label": "long oscillator (partial results)",
    "model": {"states": {"u": {"initial": 1.0, "unit": "m"}, "v": {"initial": 0.0, "unit": "m/s"}},
              "ddt": {"u": "v", "v": "-u"}},
    "span": [0.0, 5.0e5], "output": {"count": 50_001}, "tolerance": {"rtol": 1e-12, "atol": 1e-14},
    "method": "dormand_prince_54", "limits": {"max_steps": 100_000_000, "max_wall_seconds": 600},
    "machine_code": "never",
}


def get_result(stack, job_id, fmt="json"):
    return requests.get(f"{stack.base}/v1/jobs/{job_id}/result", params={"format": fmt}, timeout=10)


def test_a_running_job_serves_its_live_snapshot_and_a_cancelled_one_its_partial_result(stack):
    job_id = stack.submit(LONG)
    try:
        stack.wait(job_id, states=("running",), timeout=60)
        # generous bound (a loaded 2-core machine): the first snapshot comes 0.5 s into the solve
        deadline = time.monotonic() + 60
        while (live := get_result(stack, job_id)).status_code == 409 and time.monotonic() < deadline:
            assert live.headers["Retry-After"] == "1"
            time.sleep(0.2)
        assert live.status_code == 200 and live.headers["Cache-Control"] == "no-store"
        body = live.json()
        assert body["state"] == "running" and body["partial"] is True and body["outcome"] is None
        assert body["units"] == {"u": "m", "v": "m/s"} and body["report"]["accepted_steps"] > 0
        t = np.array(body["times"])
        assert len(t) >= 1 and t.max() <= body["t_reached"]
        np.testing.assert_allclose(body["states"]["u"], np.cos(t), atol=1e-4)
    finally:
        requests.post(f"{stack.base}/v1/jobs/{job_id}/cancel", timeout=10)
    view = stack.wait(job_id, timeout=60)
    assert view["state"] == "cancelled" and view["progress"] > 0
    final = get_result(stack, job_id)
    assert final.status_code == 200, final.text
    body = final.json()
    assert body["state"] == "cancelled" and body["partial"] is True and body["outcome"] == "cancelled"
    assert body["message"].startswith("cancelled on request at t=")
    assert body["t_reached"] == pytest.approx(view["digest"]["t_reached"])
    assert view["progress"] == pytest.approx(body["t_reached"] / 5e5, abs=1e-4)
    t = np.array(body["times"])
    assert len(t) == int(body["t_reached"] // 10) + 1  # every output time reached, none thinned
    np.testing.assert_allclose(body["states"]["u"], np.cos(t), atol=1e-4)
    assert body["report"]["step_history"]["t"] and body["report"]["accepted_steps"] > 0
    csv = get_result(stack, job_id, "csv").text.splitlines()
    assert csv[1].startswith("# partial: solved up to t = ") and csv[1].endswith("of 500000; cancelled")
    assert csv[2] == "t,u [m],v [m/s]" and len(csv) == 3 + len(t)
    z = np.load(io.BytesIO(get_result(stack, job_id, "npz").content), allow_pickle=False)
    assert bool(z["partial"]) and float(z["t_reached"]) == pytest.approx(body["t_reached"])
    assert list(z["state_units"]) == ["m", "m/s"] and z["y"].shape == (len(t), 2)


def test_a_job_that_blows_up_returns_200_partial_with_its_events(stack):
    # y' = y^2, y(0) = 1: y = 1/(1 - t) crosses 2 at t = 0.5 and leaves every bound at t = 1
    spec = {"model": {"states": {"y": 1.0}, "ddt": {"y": "y^2"},
                      "events": [{"name": "doubled", "when": "y - 2", "direction": "rising"}]},
            "span": [0.0, 2.0], "output": {"count": 21}}
    job_id = stack.submit(spec)
    view = stack.wait(job_id)
    assert view["state"] == "failed" and view["progress"] == pytest.approx(0.5, abs=1e-3)
    r = get_result(stack, job_id)
    assert r.status_code == 200
    body = r.json()
    assert body["partial"] and body["outcome"] == "step_underflow" and len(body["times"]) == 11
    assert [e["name"] for e in body["events"]] == ["doubled"]
    assert body["events"][0]["t"] == pytest.approx(0.5, abs=1e-6)
    assert body["events"][0]["states"]["y"] == pytest.approx(2.0, abs=1e-6)
