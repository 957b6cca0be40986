"""The Python client's Result carries a job's sensitivities and ranking (the JSON form, as the
service serves it: real Redis, the worker's run_job in this process, Flask's test client)."""
import numpy as np
from stifflane_client.results import Result

from worker.run_job import run_job

SPEC = {
    "model": {"states": {"a": 2.0, "b": 0.0}, "parameters": {"k": 0.5},
              "reactions": [{"name": "decay", "equation": "a -> b", "k": "k"}]},
    "span": [0.0, 4.0], "output": {"count": 41}, "tolerance": {"rtol": 1e-10, "atol": 1e-13},
    "sensitivity": {"parameters": ["k"], "initial": ["a"],
                    "rank": [{"state": "a", "summary": "crossing", "value": 1.0},
                             {"state": "b", "summary": "final"}]},
}


def test_result_exposes_sensitivities_and_ranking(client, store):
    job_id = client.post("/v1/jobs", json=SPEC).get_json()["id"]
    run_job(store, job_id)
    res = Result.from_json(client.get(f"/v1/jobs/{job_id}/result").get_json())
    # d ln a / d ln k = -k t (a = a0 exp(-k t)); b(0) = 0 has no relative sensitivity (NaN)
    np.testing.assert_allclose(res.sensitivities("a")[1:, 0], -0.5 * res.t[1:], rtol=1e-6)
    assert np.isnan(res.sensitivities("b")[0, 0])
    np.testing.assert_allclose(res.sensitivities("a", normalised=False)[:, 1], np.exp(-0.5 * res.t), rtol=1e-6)
    crossing, final = res.ranking
    # t* = ln(a0/v)/k: d ln t*/d ln k = -1, d ln t*/d ln a0 = 1/ln(a0/v) = 1.44: a0 ranks first
    assert crossing["label"] == "crossing a=1" and abs(crossing["value"] - np.log(2.0) / 0.5) < 1e-8
    assert final["label"] == "final b"
    frame = res.ranking_table()
    assert list(frame["wrt"][frame["output"] == "crossing a=1"]) == ["init:a", "k"]
    k_row = frame[(frame["output"] == "crossing a=1") & (frame["wrt"] == "k")].iloc[0]
    assert k_row["reactions"] == "decay" and abs(k_row["normalised"] + 1.0) < 1e-6


def test_a_result_without_sensitivities():
    res = Result.from_json({"times": [0.0], "states": {"a": [1.0]}})
    assert res.sensitivity == {} and res.ranking == []
