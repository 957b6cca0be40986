"""Sensitivities through the service: a job spec names parameters and initial values, the
result carries dy/dθ raw and normalised in JSON, CSV and .npz; bad names are 422s.

Real Redis, the worker's own run_job in this process (real engine), the API through Flask's
test client. Oracle: first-order decay a(t) = a0 exp(-k t), so da/dk = -t a(t),
da/da0 = exp(-k t), d ln a / d ln k = -k t (calculus; any kinetics textbook).
"""
import io

import numpy as np

from worker.run_job import run_job

DECAY = {
    "label": "decay with sensitivities",
    "model": {"states": {"a": {"initial": 2.0, "unit": "mol/L"}, "b": 0.0},
              "parameters": {"k": {"value": 0.5, "unit": "1/s"}},
              "reactions": [{"equation": "a -> b", "k": "k"}]},
    "span": [0.0, 4.0], "output": {"count": 5},
    "tolerance": {"rtol": 1e-9, "atol": 1e-12},
    "sensitivity": {"parameters": ["k"], "initial": ["a"]},
}


def run(client, store, spec) -> str:
    r = client.post("/v1/jobs", json=spec)
    assert r.status_code == 202, r.get_json()
    job_id = r.get_json()["id"]
    run_job(store, job_id)
    return job_id


def test_a_job_returns_sensitivities_raw_and_normalised(client, store):
    job_id = run(client, store, DECAY)
    body = client.get(f"/v1/jobs/{job_id}/result").get_json()
    assert body["outcome"] == "succeeded" and list(body["states"]) == ["a", "b"]
    t = np.array(body["times"])
    a = 2.0 * np.exp(-0.5 * t)
    s = body["sensitivity"]
    assert s["wrt"] == ["k", "init:a"] and s["values"] == {"k": 0.5, "init:a": 2.0}
    np.testing.assert_allclose(s["raw"]["a"]["k"], -t * a, rtol=1e-6, atol=1e-10)
    np.testing.assert_allclose(s["raw"]["b"]["k"], t * a, rtol=1e-6, atol=1e-10)  # b = a0 - a
    np.testing.assert_allclose(s["raw"]["a"]["init:a"], np.exp(-0.5 * t), rtol=1e-6)
    np.testing.assert_allclose(s["normalised"]["a"]["k"][1:], -0.5 * t[1:], rtol=1e-6)
    assert s["normalised"]["b"]["k"][0] is None  # b(0) = 0: no relative sensitivity there


def test_csv_and_npz_carry_the_sensitivities(client, store):
    job_id = run(client, store, DECAY)
    text = client.get(f"/v1/jobs/{job_id}/result?format=csv").get_data(as_text=True)
    header = [line for line in text.splitlines() if not line.startswith("#")][0].split(",")
    assert header == ["t", "a [mol/L]", "b", "d(a)/d(k)", "d(b)/d(k)", "d(a)/d(init:a)", "d(b)/d(init:a)",
                      "dln(a)/dln(k)", "dln(b)/dln(k)", "dln(a)/dln(init:a)", "dln(b)/dln(init:a)"]
    npz = np.load(io.BytesIO(client.get(f"/v1/jobs/{job_id}/result?format=npz").get_data()))
    assert list(npz["sensitivity_wrt"]) == ["k", "init:a"]
    assert npz["sensitivity"].shape == (5, 2, 2) == npz["sensitivity_normalised"].shape
    np.testing.assert_allclose(npz["sensitivity"][:, 0, 0], -npz["t"] * npz["y"][:, 0], rtol=1e-6, atol=1e-10)


def test_a_job_without_sensitivities_has_none(client, store):
    spec = {k: v for k, v in DECAY.items() if k != "sensitivity"}
    body = client.get(f"/v1/jobs/{run(client, store, spec)}/result").get_json()
    assert "sensitivity" not in body


def test_unknown_or_missing_names_are_refused_with_the_field(client):
    r = client.post("/v1/jobs", json=dict(DECAY, sensitivity={"parameters": ["kk"], "initial": ["c"]}))
    assert r.status_code == 422
    text = str(r.get_json())
    assert "/sensitivity/parameters/0" in text and "did you mean 'k'" in text
    assert "/sensitivity/initial/0" in text
    r = client.post("/v1/jobs", json=dict(DECAY, sensitivity={}))
    assert r.status_code == 422 and "at least one" in str(r.get_json())


def test_a_batch_base_asking_for_sensitivities_is_refused_not_ignored(client):
    spec = {"base": DECAY, "grid": {"parameters": {"k": {"values": [0.1, 0.2]}}}}
    r = client.post("/v1/batches", json=spec)
    assert r.status_code == 422
    assert "single jobs" in str(r.get_json())
