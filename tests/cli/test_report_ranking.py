"""`stifflane report` prints the sensitivity ranking of a job whose spec asked for one (a real
result: Redis, the worker's run_job in this process, the API through Flask's test client)."""
from cli.report import format_report
from worker.run_job import run_job

SPEC = {
    "model": {"states": {"A": 1.0, "B": 0.0, "C": 0.0}, "parameters": {"k1": 0.8, "k2": 0.3},
              "reactions": [{"name": "first", "equation": "A -> B", "k": "k1"},
                            {"equation": "B -> C", "k": "k2"}]},
    "span": [0.0, 6.0], "output": {"count": 61},
    "sensitivity": {"parameters": ["k1", "k2"], "initial": ["A"],
                    "rank": [{"state": "B", "summary": "max"},
                             {"state": "C", "summary": "crossing", "value": 2.0}]},
}


def test_the_report_lists_the_ranking(client, store):
    job_id = client.post("/v1/jobs", json=SPEC).get_json()["id"]
    run_job(store, job_id)
    body = client.get(f"/v1/jobs/{job_id}/result").get_json()
    text = format_report(body)
    lines = text.splitlines()
    head = lines.index("max B: value " + f"{body['sensitivity']['ranking'][0]['value']:.4g}"
                       + f", t = {body['sensitivity']['ranking'][0]['t']:.4g}")
    assert lines[head + 1].split() == ["rank", "θ", "reactions", "normalised", "raw"]
    rows = {line.split()[1]: line.split() for line in lines[head + 3:head + 6]}
    order = [e["wrt"] for e in body["sensitivity"]["ranking"][0]["entries"]]
    assert [rows[w][0] for w in order] == ["1", "2", "3"]
    assert rows["k1"][2] == "first" and rows["k2"][2] == "R2" and rows["init:A"][2] == "-"
    # C (at most 1) never reaches 2: the output says so instead of a table
    assert "crossing C=2: delay -" in text and "note: C does not pass 2" in text
    assert "Which parameters matter" in text


def test_no_ranking_no_section():
    assert "Which parameters matter" not in format_report({"outcome": "succeeded", "sensitivity": {"wrt": ["k"]}})
