"""API keys, ownership, rate limits, quotas and Idempotency-Key, through the test client."""
import dataclasses
import json
import threading

import pytest

from jobs import accounts
from tests.service.test_jobs_api import DECAY


@pytest.fixture
def secured(settings, store):
    from service import create_app

    s = dataclasses.replace(settings, auth_mode="keys", rate_limit=1000)
    app = create_app(s, store=store)
    _, ana = accounts.create_key(store.r, store.keys, "ana")
    _, ben = accounts.create_key(store.r, store.keys, "ben")
    return app, {"ana": {"Authorization": f"Bearer {ana}"}, "ben": {"Authorization": f"Bearer {ben}"}}


def test_requests_without_a_key_get_401_with_a_challenge(secured):
    app, _ = secured
    r = app.test_client().get("/v1/jobs")
    assert r.status_code == 401 and r.headers["WWW-Authenticate"].startswith("Bearer")
    assert r.mimetype == "application/problem+json"


def test_a_wrong_or_revoked_key_is_401(secured, store):
    app, who = secured
    c = app.test_client()
    assert c.get("/v1/jobs", headers={"Authorization": "Bearer slk_00000000_" + "A" * 43}).status_code == 401
    key_id, key = accounts.create_key(store.r, store.keys, "cy")
    assert c.get("/v1/jobs", headers={"Authorization": f"Bearer {key}"}).status_code == 200
    assert accounts.revoke_key(store.r, store.keys, key_id)
    assert c.get("/v1/jobs", headers={"Authorization": f"Bearer {key}"}).status_code == 401


def test_keys_are_stored_only_as_digests(store):
    _, key = accounts.create_key(store.r, store.keys, "dee")
    dump = b"".join(store.r.dump(k) or b"" for k in store.r.keys(store.keys.prefix + ":*"))
    secret = key.split("_", 2)[2]
    assert key.encode() not in dump and secret.encode() not in dump
    assert len(secret) * 6 >= 128  # at least 128 random bits (base64url chars)


def test_a_key_in_the_query_string_is_refused(secured):
    app, who = secured
    r = app.test_client().get("/v1/jobs?api_key=whatever", headers=who["ana"])
    assert r.status_code == 400 and "header" in r.get_json()["detail"]


def test_health_and_openapi_are_public(secured):
    app, _ = secured
    c = app.test_client()
    assert c.get("/v1/health").status_code == 200 and c.get("/v1/openapi.json").status_code == 200


def test_another_owner_gets_404_on_every_job_endpoint(secured):
    app, who = secured
    c = app.test_client()
    job = c.post("/v1/jobs", json=DECAY, headers=who["ana"]).get_json()
    etag = c.get(f"/v1/jobs/{job['id']}", headers=who["ana"]).headers["ETag"]
    for method, path, extra in [("get", "", {}), ("get", "/result", {}), ("get", "/spec", {}),
                                ("post", "/cancel", {}), ("get", "", {"If-None-Match": etag})]:
        r = getattr(c, method)(f"/v1/jobs/{job['id']}{path}", headers={**who["ben"], **extra})
        assert r.status_code == 404, (method, path)
        text = r.get_data(as_text=True)
        assert "first-order decay" not in text and "queued" not in text  # no data of ana's job
    assert c.get("/v1/jobs", headers=who["ben"]).get_json()["items"] == []
    assert c.get(f"/v1/jobs/{job['id']}", headers=who["ana"]).get_json()["state"] == "queued"


def test_rate_limits_answer_429_with_headers(settings, store):
    from service import create_app

    app = create_app(dataclasses.replace(settings, rate_limit=3), store=store)
    c = app.test_client()
    statuses = [c.get("/v1/jobs").status_code for _ in range(4)]
    assert statuses == [200, 200, 200, 429]
    r = c.get("/v1/jobs")
    assert int(r.headers["Retry-After"]) >= 1 and r.headers["RateLimit-Remaining"] == "0"


def test_a_quota_limits_queued_work_per_owner(settings, store):
    from service import create_app

    app = create_app(dataclasses.replace(settings, max_active_jobs=2), store=store)
    c = app.test_client()
    assert [c.post("/v1/jobs", json=DECAY).status_code for _ in range(3)] == [202, 202, 429]


def test_a_retry_with_the_same_idempotency_key_returns_the_first_reply(client):
    h = {"Idempotency-Key": "run-7"}
    first = client.post("/v1/jobs", json=DECAY, headers=h)
    again = client.post("/v1/jobs", json=DECAY, headers=h)
    assert first.status_code == again.status_code == 202
    assert first.get_json()["id"] == again.get_json()["id"]
    assert again.headers["Location"] == first.headers["Location"]
    assert len(client.get("/v1/jobs").get_json()["items"]) == 1


def test_the_same_idempotency_key_with_another_body_is_422(client):
    client.post("/v1/jobs", json=DECAY, headers={"Idempotency-Key": "k1"})
    r = client.post("/v1/jobs", json={**DECAY, "span": [0.0, 2.0]}, headers={"Idempotency-Key": "k1"})
    assert r.status_code == 422


def test_a_retry_while_the_first_is_in_flight_is_409(client, store):
    from jobs import guards

    body = json.dumps(DECAY).encode()
    guards.idempotency_begin(store.r, store.keys, "local", "k2", guards.fingerprint(b"/v1/jobs\n" + body))
    r = client.post("/v1/jobs", data=body, content_type="application/json", headers={"Idempotency-Key": "k2"})
    assert r.status_code == 409 and r.headers["Retry-After"]


def test_an_invalid_first_request_does_not_burn_the_key(client):
    bad = {**DECAY, "span": [1.0, 0.0]}
    assert client.post("/v1/jobs", json=bad, headers={"Idempotency-Key": "k3"}).status_code == 422
    # nothing was created, so the corrected request may use the same key
    assert client.post("/v1/jobs", json=DECAY, headers={"Idempotency-Key": "k3"}).status_code == 202


def test_concurrent_identical_submissions_with_one_key_make_one_job(app, client):
    codes, ids = [], set()

    def submit():
        r = app.test_client().post("/v1/jobs", json=DECAY, headers={"Idempotency-Key": "burst"})
        codes.append(r.status_code)
        if r.status_code == 202:
            ids.add(r.get_json()["id"])

    threads = [threading.Thread(target=submit) for _ in range(100)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert len(ids) == 1 and set(codes) <= {202, 409}
    assert len(client.get("/v1/jobs?limit=200").get_json()["items"]) == 1


def test_one_idempotency_key_cannot_create_a_job_and_then_a_batch(client):
    assert client.post("/v1/jobs", json=DECAY, headers={"Idempotency-Key": "k5"}).status_code == 202
    batch = {"base": DECAY, "members": [{"parameters": {"k": 1.0}}], "summaries": [{"kind": "final", "of": "a"}]}
    assert client.post("/v1/batches", json=batch, headers={"Idempotency-Key": "k5"}).status_code == 422
    first = client.post("/v1/batches", json=batch, headers={"Idempotency-Key": "k6"})
    again = client.post("/v1/batches", json=batch, headers={"Idempotency-Key": "k6"})
    assert first.status_code == again.status_code == 202 and first.get_json()["id"] == again.get_json()["id"]


def test_every_resource_endpoint_is_404_for_another_owner(secured):
    """Walks the URL map: no endpoint that names a job or batch serves it to a second key."""
    app, who = secured
    c = app.test_client()
    job = c.post("/v1/jobs", json=DECAY, headers=who["ana"]).get_json()["id"]
    batch_body = {"base": DECAY, "members": [{"parameters": {"k": 1.0}}],
                  "summaries": [{"kind": "final", "of": "a"}]}
    batch = c.post("/v1/batches", json=batch_body, headers=who["ana"]).get_json()["id"]
    ids = {"job_id": job, "batch_id": batch}
    probed = 0
    for rule in app.url_map.iter_rules():
        names = set(rule.arguments) & set(ids)
        if not rule.rule.startswith("/v1/") or not names:
            continue
        path = rule.rule
        for name in rule.arguments:
            path = path.replace(f"<{name}>", ids[name])
        for method in sorted(rule.methods - {"HEAD", "OPTIONS"}):
            r = c.open(path, method=method, headers=who["ben"])
            text = r.get_data(as_text=True)
            assert r.status_code == 404, (method, path, r.status_code)
            assert "first-order decay" not in text and '"state"' not in text, (method, path)
            probed += 1
    assert probed >= 8
    assert c.get(f"/v1/jobs/{job}", headers=who["ana"]).status_code == 200
