"""Which steps matter, through the service: a spec names outputs in sensitivity.rank, the worker
ranks the parameters, the result serves the ranking in JSON (sensitivity.ranking) and as CSV
(?table=ranking); bad outputs are 422s naming the field.

Real Redis, the worker's own run_job in this process (real engine), the API through Flask's
test client. Oracle: A -> B -> C first order, B(T) = A0 k1/(k2 - k1) (exp(-k1 T) - exp(-k2 T))
(any kinetics textbook); its logarithmic derivatives by hand:
d ln B / d ln k1 = 1 + k1/(k2 - k1) - k1 T exp(-k1 T) / (exp(-k1 T) - exp(-k2 T)),
d ln B / d ln k2 = -k2/(k2 - k1) + k2 T exp(-k2 T) / (exp(-k1 T) - exp(-k2 T)).
"""
import csv
import io
import math

import pytest

from worker.run_job import run_job

K1, K2, T = 0.8, 0.3, 6.0
CHAIN = {
    "label": "chain with a ranking",
    "model": {"states": {"A": 1.0, "B": 0.0, "C": 0.0}, "parameters": {"k1": K1, "k2": K2},
              "reactions": [{"name": "first", "equation": "A -> B", "k": "k1"},
                            {"name": "second", "equation": "B -> C", "k": "k2"}]},
    "span": [0.0, T], "output": {"count": 121}, "tolerance": {"rtol": 1e-10, "atol": 1e-14},
    "sensitivity": {"parameters": ["k1", "k2"],
                    "rank": [{"state": "B", "summary": "final"},
                             {"state": "B", "summary": "max"},
                             {"state": "C", "summary": "crossing", "value": 0.5}]},
}


def run(client, store, spec) -> str:
    r = client.post("/v1/jobs", json=spec)
    assert r.status_code == 202, r.get_json()
    job_id = r.get_json()["id"]
    run_job(store, job_id)
    return job_id


def test_the_result_carries_the_ranking(client, store):
    body = client.get(f"/v1/jobs/{run(client, store, CHAIN)}/result").get_json()
    final, peak, crossing = body["sensitivity"]["ranking"]
    assert final["output"] == {"state": "B", "summary": "final"} and final["label"] == "final B"
    e1, e2 = math.exp(-K1 * T), math.exp(-K2 * T)
    assert final["value"] == pytest.approx(K1 / (K2 - K1) * (e1 - e2), rel=1e-8)
    want = {"k1": 1 + K1 / (K2 - K1) - K1 * T * e1 / (e1 - e2), "k2": -K2 / (K2 - K1) + K2 * T * e2 / (e1 - e2)}
    got = {e["wrt"]: e for e in final["entries"]}
    assert {k: got[k]["normalised"] for k in want} == pytest.approx(want, rel=1e-7)
    assert got["k1"]["reactions"] == ["first"] and got["k2"]["reactions"] == ["second"]
    assert [e["wrt"] for e in final["entries"]] == sorted(want, key=lambda k: -abs(want[k]))
    # B_max depends on k1/k2 only: its two normalised sensitivities cancel
    assert sum(e["normalised"] for e in peak["entries"]) == pytest.approx(0.0, abs=1e-7)
    assert peak["t"] == pytest.approx(math.log(K1 / K2) / (K1 - K2), rel=1e-7)
    # C passes 0.5 later when either step is slower: both delays' sensitivities negative
    assert crossing["output"] == {"state": "C", "summary": "crossing", "value": 0.5, "direction": "both"}
    assert crossing["value"] == crossing["t"] and all(e["normalised"] < 0 for e in crossing["entries"])


def test_the_ranking_as_csv(client, store):
    job_id = run(client, store, CHAIN)
    r = client.get(f"/v1/jobs/{job_id}/result?table=ranking")
    assert r.status_code == 200 and r.mimetype == "text/csv"
    assert "ranking.csv" in r.headers["Content-Disposition"]
    lines = r.get_data(as_text=True).splitlines()
    assert lines[0].startswith("#")  # the caution, as every CSV of ours
    rows = list(csv.DictReader(lines[1:]))
    assert [r["output"] for r in rows] == ["final B"] * 2 + ["max B"] * 2 + ["crossing C=0.5"] * 2
    assert [r["rank"] for r in rows[:2]] == ["1", "2"]
    body = client.get(f"/v1/jobs/{job_id}/result").get_json()
    first = body["sensitivity"]["ranking"][0]["entries"][0]
    assert rows[0]["wrt"] == first["wrt"] and float(rows[0]["normalised"]) == first["normalised"]
    assert rows[0]["reactions"] == ";".join(first["reactions"])
    assert client.get(f"/v1/jobs/{job_id}/result?table=ranking&format=csv").status_code == 200
    assert client.get(f"/v1/jobs/{job_id}/result?table=outputs&format=csv").mimetype == "text/csv"


def test_no_ranking_bad_table_and_other_formats(client, store):
    job_id = run(client, store, CHAIN)
    r = client.get(f"/v1/jobs/{job_id}/result?table=ranking&format=npz")
    assert r.status_code == 406 and "sensitivity.ranking" in r.get_json()["detail"]
    r = client.get(f"/v1/jobs/{job_id}/result?table=rank")
    assert r.status_code == 400 and r.get_json()["errors"][0]["pointer"] == "/query/table"
    plain = dict(CHAIN, sensitivity={"parameters": ["k1"]})
    other = run(client, store, plain)
    assert "ranking" not in client.get(f"/v1/jobs/{other}/result").get_json()["sensitivity"]
    r = client.get(f"/v1/jobs/{other}/result?table=ranking")
    assert r.status_code == 404 and r.get_json()["type"].endswith("/no-ranking")


def test_a_queued_job_has_no_ranking_yet(client):
    job_id = client.post("/v1/jobs", json=CHAIN).get_json()["id"]
    r = client.get(f"/v1/jobs/{job_id}/result?table=ranking")
    assert r.status_code == 409 and r.headers["Retry-After"] == "1"


@pytest.mark.parametrize("item, pointer, words", [
    ({"state": "BB", "summary": "max"}, "/sensitivity/rank/0/state", "did you mean 'B'"),
    ({"state": "B", "summary": "peak"}, "/sensitivity/rank/0/summary", "must be one of"),
    ({"state": "B", "summary": "at"}, "/sensitivity/rank/0/t", "is required for summary 'at'"),
    ({"state": "B", "summary": "at", "t": 7}, "/sensitivity/rank/0/t", "must lie in the span"),
    ({"state": "B", "summary": "crossing"}, "/sensitivity/rank/0/value", "is required for summary 'crossing'"),
    ({"state": "B", "summary": "max", "value": 1}, "/sensitivity/rank/0/value", "only for summary 'crossing'"),
    ({"state": "B", "summary": "crossing", "value": 1, "direction": "up"}, "/sensitivity/rank/0/direction",
     "must be one of"),
])
def test_bad_outputs_are_422_naming_the_field(client, item, pointer, words):
    r = client.post("/v1/jobs", json=dict(CHAIN, sensitivity={"parameters": ["k1"], "rank": [item]}))
    assert r.status_code == 422
    errors = r.get_json()["errors"]
    assert any(e["pointer"] == pointer and words in e["detail"] for e in errors), errors


def test_too_many_outputs_are_refused(client):
    rank = [{"state": "B", "summary": "final"}] * 21
    r = client.post("/v1/jobs", json=dict(CHAIN, sensitivity={"parameters": ["k1"], "rank": rank}))
    assert r.status_code == 422 and "/sensitivity/rank" in str(r.get_json())


def test_machine_code_of_a_sensitivity_job_is_not_served_to_a_plain_job(client, store):
    # the augmented model (states and sensitivities) shares the model's content hash; the
    # machine-code kernels a process keeps must still be told apart, in either order and for
    # different sensitivity parameters (9, 6 and 3 equations for the same chain)
    model = dict(CHAIN["model"], title="machine code twice")
    jobs = [dict(CHAIN, model=model, machine_code="always", sensitivity={"parameters": ["k1", "k2"]}),
            dict(CHAIN, model=model, machine_code="always", sensitivity={"parameters": ["k2"]}),
            {k: v for k, v in dict(CHAIN, model=model, machine_code="always").items() if k != "sensitivity"},
            dict(CHAIN, model=model, machine_code="always", sensitivity={"parameters": ["k1", "k2"]})]
    for spec in jobs:
        job_id = run(client, store, spec)
        body = client.get(f"/v1/jobs/{job_id}/result").get_json()
        assert body["outcome"] == "succeeded", body["message"]
        assert body["report"]["machine_code"]["used"] is True
        want = spec.get("sensitivity", {}).get("parameters")
        assert (body["sensitivity"]["wrt"] if want else None) == want
