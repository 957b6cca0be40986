"""The /v1 HTTP contract, through Flask's test client on a real Redis."""
import json
import re

import pytest

DECAY = {
    "model": {"title": "first-order decay", "states": {"a": 1.0},
              "parameters": {"k": 2.0}, "ddt": {"a": "-k*a"}},
    "span": [0.0, 1.0],
    "output": {"count": 11},
}

PROBLEM = "application/problem+json"


def post(client, body, **kw):
    data = body if isinstance(body, (str, bytes)) else json.dumps(body)
    return client.post("/v1/jobs", data=data, content_type=kw.pop("content_type", "application/json"), **kw)


def pointers(resp):
    return {e["pointer"]: e["detail"] for e in resp.get_json()["errors"]}


def test_create_answers_202_with_location_and_retry_after(client):
    r = post(client, DECAY)
    assert r.status_code == 202
    body = r.get_json()
    assert body["state"] == "queued" and r.headers["Location"] == f"/v1/jobs/{body['id']}"
    assert int(r.headers["Retry-After"]) >= 1


def test_an_unchanged_poll_costs_a_304(client):
    job = post(client, DECAY).get_json()
    first = client.get(f"/v1/jobs/{job['id']}")
    assert first.status_code == 200 and first.get_json()["progress"] == 0.0
    again = client.get(f"/v1/jobs/{job['id']}", headers={"If-None-Match": first.headers["ETag"]})
    assert again.status_code == 304 and again.data == b""


def test_the_etag_changes_when_the_job_changes(client, store):
    job = post(client, DECAY).get_json()
    etag = client.get(f"/v1/jobs/{job['id']}").headers["ETag"]
    store.cancel(job["id"])
    r = client.get(f"/v1/jobs/{job['id']}", headers={"If-None-Match": etag})
    assert r.status_code == 200 and r.get_json()["state"] == "cancelled"


def test_result_before_success_is_a_409_problem(client):
    job = post(client, DECAY).get_json()
    r = client.get(f"/v1/jobs/{job['id']}/result")
    assert r.status_code == 409 and r.mimetype == PROBLEM and r.get_json()["state"] == "queued"


def test_cancel_of_a_queued_job_is_final(client):
    job = post(client, DECAY).get_json()
    r = client.post(f"/v1/jobs/{job['id']}/cancel")
    assert r.status_code == 202 and r.get_json()["state"] == "cancelled"


def test_listing_pages_with_a_link_header_and_filters_by_state(client):
    ids = [post(client, DECAY).get_json()["id"] for _ in range(3)]
    client.post(f"/v1/jobs/{ids[0]}/cancel")
    r = client.get("/v1/jobs?limit=2")
    assert [j["id"] for j in r.get_json()["items"]] == ids[:0:-1]
    assert 'rel="next"' in r.headers["Link"]
    nxt = r.headers["Link"].split(">")[0].lstrip("<")
    assert [j["id"] for j in client.get(nxt).get_json()["items"]] == [ids[0]]
    assert {j["label"] for j in r.get_json()["items"]} == {"first-order decay"}
    assert {j["owner"] for j in r.get_json()["items"]} == {"local"}
    cancelled = client.get("/v1/jobs?state=cancelled").get_json()["items"]
    assert [j["id"] for j in cancelled] == [ids[0]]


def test_the_stored_spec_can_be_read_back(client):
    job = post(client, DECAY).get_json()
    spec = client.get(f"/v1/jobs/{job['id']}/spec").get_json()
    assert spec["model"]["ddt"] == {"a": "-k*a"} and spec["method"] == "auto"


@pytest.mark.parametrize("body, status, title", [
    ("{not json", 400, "Malformed JSON"),
    ('{"span": [0, NaN]}', 400, "Malformed JSON"),
    ('{"a": 1, "a": 2}', 400, "Malformed JSON"),
    ("[1, 2]", 422, "Invalid job spec"),
])
def test_malformed_bodies_get_problem_documents(client, body, status, title):
    r = post(client, body)
    assert r.status_code == status and r.mimetype == PROBLEM and r.get_json()["title"] == title


def test_wrong_media_type_is_415(client):
    r = post(client, json.dumps(DECAY), content_type="text/plain")
    assert r.status_code == 415 and r.mimetype == PROBLEM


def test_oversized_body_is_413(client, app):
    r = post(client, "x" * (app.config["MAX_CONTENT_LENGTH"] + 1))
    assert r.status_code == 413 and r.mimetype == PROBLEM


def test_unknown_route_and_method_are_problems(client):
    assert client.get("/v1/nowhere").mimetype == PROBLEM
    r = client.delete("/v1/jobs")
    assert r.status_code == 405 and r.mimetype == PROBLEM and "POST" in r.headers["Allow"]
    assert client.get("/v1/jobs/" + "0" * 28).status_code == 404


def test_unknown_fields_are_named_by_pointer(client):
    r = post(client, {**DECAY, "colour": "red"})
    assert r.status_code == 422 and "/colour" in pointers(r)


def test_each_bad_field_is_listed(client):
    r = post(client, {**DECAY, "span": [1.0, 0.0], "method": "magic",
                      "tolerance": {"rtol": 5.0}, "initial": {"zz": 1.0}})
    p = pointers(r)
    assert r.status_code == 422
    assert {"/span", "/method", "/tolerance/rtol", "/initial/zz"} <= set(p)
    assert "auto" in p["/method"]  # says what is allowed


def test_an_unknown_name_in_an_expression_is_named(client):
    bad = json.loads(json.dumps(DECAY))
    bad["model"]["ddt"]["a"] = "-kk*a"
    r = post(client, bad)
    p = pointers(r)
    assert r.status_code == 422 and "/model/ddt/a" in p and "kk" in p["/model/ddt/a"]


@pytest.mark.parametrize("text", [
    "__import__('os').system('id')",
    "a.__class__",
    "(lambda: 1)()",
    "a[0]",
    "'text'",
    "9**9**9",
    "(" * 10000 + "a" + ")" * 10000,
])
def test_code_in_an_expression_is_refused_not_run(client, text):
    bad = json.loads(json.dumps(DECAY))
    bad["model"]["ddt"]["a"] = text
    r = post(client, bad)
    assert r.status_code == 422 and "/model/ddt/a" in pointers(r)


def test_too_many_output_points_is_refused(client, app):
    r = post(client, {**DECAY, "output": {"count": app.extensions["stifflane"].settings.max_output_points + 1}})
    assert r.status_code == 422 and any(k.startswith("/output") for k in pointers(r))


def test_health_reports_redis_and_queues(client):
    r = client.get("/v1/health")
    body = r.get_json()
    assert r.status_code == 200 and body["redis"]["reachable"] is True and "queues" in body


def test_the_openapi_document_describes_every_route(client, app):
    doc = client.get("/v1/openapi.json").get_json()
    assert doc["openapi"].startswith("3.1")
    routes = {re.sub(r"<(?:\w+:)?(\w+)>", r"{\1}", r.rule) for r in app.url_map.iter_rules()
              if r.rule.startswith("/v1/") and r.rule != "/v1/openapi.json"}
    assert routes <= set(doc["paths"])
    assert "JobSpec" in doc["components"]["schemas"]


def test_a_spec_can_be_checked_without_submitting(client):
    r = client.post("/v1/spec-checks", json=DECAY)
    assert r.status_code == 200 and r.get_json()["valid"] is True
    assert r.get_json()["model"]["states"] == ["a"]
    bad = json.loads(json.dumps(DECAY))
    bad["model"]["ddt"]["a"] = "-k*"
    r = client.post("/v1/spec-checks", json=bad)
    assert r.status_code == 422 and "/model/ddt/a" in pointers(r)
    assert client.get("/v1/jobs").get_json()["items"] == []


def redis_calls(store) -> int:
    stats = store.r.info("commandstats")
    return sum(v["calls"] for k, v in stats.items() if k != "cmdstat_info")


def test_an_unchanged_poll_costs_at_most_three_redis_commands(client, store):
    job = post(client, DECAY).get_json()
    etag = client.get(f"/v1/jobs/{job['id']}").headers["ETag"]
    before = redis_calls(store)
    assert client.get(f"/v1/jobs/{job['id']}", headers={"If-None-Match": etag}).status_code == 304
    # HMGET rev+owner, then INCR+EXPIRE of the owner's rate window (one round trip)
    assert redis_calls(store) - before <= 3


def test_health_notices_workers_that_stopped_consuming(client, store, monkeypatch):
    from service import health

    store.worker_beat("w1", {"name": "w1"})
    post(client, DECAY)
    assert client.get("/v1/health").get_json()["status"] == "ok"
    monkeypatch.setattr(health, "STALL_SECONDS", -1)  # as if the job had waited too long
    body = client.get("/v1/health").get_json()
    assert body["status"] == "degraded" and "restart the workers" in body["detail"]
