"""Partial results: a failed, cancelled or running job returns what its run computed.

Real Redis, the worker's own run_job in this process (real engine), the API through Flask's
test client. Oracle for the blow-up: y' = y^2, y(0) = 1 has the solution 1/(1 - t), which
leaves every bound at t = 1, so a run over [0, 2] ends there.
"""
import io
import threading
import time

import numpy as np
import pytest

from worker.run_job import LIVE_ROWS, run_job

PROBLEM = "application/problem+json"


def kind(resp) -> str:
    return resp.get_json()["type"].rsplit("/", 1)[-1]

BLOW_UP = {
    "label": "blow-up",
    "model": {"states": {"y": {"initial": 1.0, "unit": "mol/L"}},
              "parameters": {"k": {"value": 1.0, "unit": "L/(mol*s)"}},
              "derived": {"twice": "2*y"}, "ddt": {"y": "k*y^2"}},
    "span": [0.0, 2.0], "output": {"count": 21},
}

# a harmonic oscillator at tight tolerance over a long span (about a minute here): runs until
# cancelled, passing an output time (every 10 time units) every few thousand steps
LONG = {
    "label": "long oscillator",
    "model": {"states": {"u": {"initial": 1.0, "unit": "m"}, "v": 0.0}, "ddt": {"u": "v", "v": "-u"}},
    "span": [0.0, 5.0e5], "output": {"count": 50_001}, "tolerance": {"rtol": 1e-12, "atol": 1e-14},
    "method": "dormand_prince_54", "limits": {"max_steps": 100_000_000, "max_wall_seconds": 600},
    "machine_code": "never",
}


def submit(client, spec) -> str:
    r = client.post("/v1/jobs", json=spec)
    assert r.status_code == 202, r.get_json()
    return r.get_json()["id"]


def run(client, store, spec) -> str:
    job_id = submit(client, spec)
    run_job(store, job_id)
    return job_id


def result(client, job_id, fmt="json"):
    return client.get(f"/v1/jobs/{job_id}/result?format={fmt}")


def test_a_run_that_blows_up_returns_its_states_up_to_where_it_stopped(client, store):
    # before: 409 "a result exists only once it has succeeded", nothing to inspect
    job_id = run(client, store, BLOW_UP)
    r = result(client, job_id)
    assert r.status_code == 200, r.get_json()
    body = r.get_json()
    assert body["state"] == "failed" and body["partial"] is True
    assert body["outcome"] == "step_underflow" and "round-off" in body["message"]
    assert body["t_reached"] == pytest.approx(1.0, abs=1e-3) and body["t_end"] == 2.0
    t = np.array(body["times"])
    assert np.allclose(t, np.linspace(0, 1, 11)) and max(t) <= body["t_reached"]
    y = np.array(body["states"]["y"])
    before_pole = t < 0.95
    assert np.allclose(y[before_pole], 1 / (1 - t[before_pole]), rtol=1e-4)
    assert body["derived"]["twice"][:3] == pytest.approx((2 * y[:3]).tolist())
    assert body["report"]["accepted_steps"] > 0 and body["report"]["step_history"]["t"]
    assert body["units"] == {"y": "mol/L", "k": "L/(mol*s)"}


def test_a_failed_jobs_progress_is_the_fraction_it_reached(client, store):
    # before: the finish left progress at the last heartbeat's value, 0 for a quick failure
    job_id = run(client, store, BLOW_UP)
    view = client.get(f"/v1/jobs/{job_id}").get_json()
    assert view["state"] == "failed" and view["progress"] == pytest.approx(0.5, abs=1e-3)


def test_a_partial_result_is_flagged_in_csv_with_units_in_the_header(client, store):
    job_id = run(client, store, BLOW_UP)
    r = result(client, job_id, "csv")
    assert r.status_code == 200 and r.mimetype == "text/csv"
    caution, partial, header, *rows = r.get_data(as_text=True).strip().splitlines()
    assert caution.startswith("# caution:")
    assert partial == "# partial: solved up to t = 1 of 2; step_underflow"
    assert header == "t,y [mol/L],twice" and len(rows) == 11


def test_a_partial_result_is_flagged_in_npz(client, store):
    job_id = run(client, store, BLOW_UP)
    r = result(client, job_id, "npz")
    assert r.status_code == 200
    z = np.load(io.BytesIO(r.data), allow_pickle=False)
    assert bool(z["partial"]) is True and float(z["t_reached"]) == pytest.approx(1.0, abs=1e-3)
    assert z["y"].shape == (11, 1) and list(z["state_units"]) == ["mol/L"]
    assert list(z["derived_units"]) == [""] and str(z["outcome"]) == "step_underflow"


def test_a_step_limited_run_keeps_its_partial_result(client, store):
    spec = dict(BLOW_UP, span=[0.0, 0.9], output={"count": 10}, limits={"max_steps": 10})
    job_id = run(client, store, spec)
    body = result(client, job_id).get_json()
    assert body["state"] == "failed" and body["outcome"] == "step_limit" and body["partial"]
    assert 0 < body["t_reached"] < 0.9 and len(body["times"]) >= 1
    assert max(body["times"]) <= body["t_reached"]
    assert body["report"]["accepted_steps"] <= 10


def test_a_succeeded_result_is_whole_and_carries_units(client, store):
    spec = dict(BLOW_UP, span=[0.0, 0.5])
    job_id = run(client, store, spec)
    body = result(client, job_id).get_json()
    assert body["state"] == "succeeded" and body["partial"] is False
    assert body["t_reached"] == pytest.approx(0.5) and body["units"]["y"] == "mol/L"
    csv_lines = result(client, job_id, "csv").get_data(as_text=True).splitlines()
    assert csv_lines[1] == "t,y [mol/L],twice"  # no partial line
    z = np.load(io.BytesIO(result(client, job_id, "npz").data), allow_pickle=False)
    assert bool(z["partial"]) is False and float(z["t_reached"]) == pytest.approx(0.5)


def test_a_job_cancelled_before_it_ran_has_no_result_and_says_why(client, store):
    job_id = submit(client, BLOW_UP)
    client.post(f"/v1/jobs/{job_id}/cancel")
    r = result(client, job_id)
    assert r.status_code == 409 and r.mimetype == PROBLEM
    problem = r.get_json()
    assert kind(r) == "no-result" and problem["state"] == "cancelled"
    assert "cancelled before it started" in problem["detail"]


def test_a_job_that_never_reached_the_solver_has_no_result(client, store):
    rec = store.create({"model": {"states": {"a": 1.0}}, "span": [0, 1], "method": "no_such_method"},
                       title="stored spec that no longer validates", method="auto", owner="local")
    run_job(store, rec.id)
    r = result(client, rec.id)
    assert r.status_code == 409 and kind(r) == "no-result"
    assert "no longer validates" in r.get_json()["detail"]


def test_a_queued_job_is_not_ready(client):
    job_id = submit(client, BLOW_UP)
    r = result(client, job_id)
    assert r.status_code == 409 and kind(r) == "result-not-ready"
    assert r.headers["Retry-After"] == "1"


def wait_for(predicate, timeout, what):
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        value = predicate()
        if value:
            return value
        time.sleep(0.1)
    raise AssertionError(f"timed out waiting for {what}")


def test_a_running_job_serves_a_bounded_live_snapshot_then_its_cancelled_partial(client, store):
    job_id = submit(client, LONG)
    worker = threading.Thread(target=run_job, args=(store, job_id))
    worker.start()
    try:
        # generous bound: a loaded 2-core machine; the first snapshot comes 0.5 s into the solve
        live = wait_for(lambda: (r := result(client, job_id)).status_code == 200 and r, 60, "a snapshot")
        assert live.headers["Cache-Control"] == "no-store"
        body = live.get_json()
        assert body["state"] == "running" and body["partial"] is True and body["outcome"] is None
        assert body["report"]["method"] == "dormand_prince_54" and body["report"]["accepted_steps"] > 0
        assert "step_history" in body["report"]
        assert 0 < body["t_reached"] < 5e5 and body["units"] == {"u": "m"}
        # later snapshots go further and stay bounded: past 3 LIVE_ROWS output times reached,
        # a snapshot holds at most LIVE_ROWS of them, from the first to the last reached
        later = wait_for(lambda: (b := result(client, job_id).get_json()).get("t_reached", 0) > 30 * LIVE_ROWS
                         and b, 120, "a later snapshot")
        times = later["times"]
        assert LIVE_ROWS / 2 < len(times) <= LIVE_ROWS and times[0] == 0.0 and times == sorted(times)
        assert later["t_reached"] - 10 <= times[-1] <= later["t_reached"]
        csv = result(client, job_id, "csv").get_data(as_text=True).splitlines()
        assert csv[1].startswith("# partial: solved up to t = ") and csv[1].endswith("of 500000; running")
        assert csv[2] == "t,u [m],v"
    finally:
        client.post(f"/v1/jobs/{job_id}/cancel")
        worker.join(60)
    assert not worker.is_alive()
    final = result(client, job_id)
    assert final.status_code == 200
    body = final.get_json()
    assert body["state"] == "cancelled" and body["outcome"] == "cancelled" and body["partial"] is True
    assert body["t_reached"] >= later["t_reached"] and len(body["times"]) > 3 * LIVE_ROWS
    view = client.get(f"/v1/jobs/{job_id}").get_json()
    assert view["progress"] == pytest.approx(body["t_reached"] / 5e5, abs=1e-4)
    assert store.live_blob(job_id) is None  # the finish replaced the snapshot


def test_a_snapshot_is_written_only_by_the_current_running_attempt(store):
    rec = store.create(BLOW_UP, title="fence", method="auto", owner="local")
    assert not store.write_live(rec.id, 1, b"x")  # queued: nobody runs it
    _, attempt = store.claim(rec.id)
    assert not store.write_live(rec.id, attempt + 1, b"x")
    assert store.write_live(rec.id, attempt, b"x") and store.live_blob(rec.id) == b"x"
    assert store.finish(rec.id, attempt, "cancelled", "cancelled", "cancelled", {}, None)
    assert store.live_blob(rec.id) is None
    assert not store.write_live(rec.id, attempt, b"y")
