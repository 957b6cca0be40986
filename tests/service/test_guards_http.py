"""Address rate windows for requests without a valid key, what health tells strangers,
credentials in URLs, and the dashboard's security headers, through the test client."""
import dataclasses

import pytest

from jobs import accounts

WRONG = {"Authorization": "Bearer slk_00000000_" + "A" * 43}


@pytest.fixture
def keyed(settings, store):
    from service import create_app

    s = dataclasses.replace(settings, auth_mode="keys", rate_limit=1000, address_rate_limit=5)
    app = create_app(s, store=store)
    _, key = accounts.create_key(store.r, store.keys, "ana")
    return app, {"Authorization": f"Bearer {key}"}


def test_wrong_keys_are_rate_limited_per_address(keyed):
    app, good = keyed
    c = app.test_client()
    codes = [c.get("/v1/jobs", headers=WRONG).status_code for _ in range(8)]
    assert codes[:5] == [401] * 5 and codes[5:] == [429] * 3
    r = c.get("/v1/jobs", headers=WRONG)
    assert r.mimetype == "application/problem+json" and int(r.headers["Retry-After"]) >= 1
    # A valid key is not held back by its address's window.
    assert c.get("/v1/jobs", headers=good).status_code == 200


def test_requests_without_any_key_count_too(keyed):
    app, _ = keyed
    c = app.test_client()
    codes = [c.get("/v1/jobs").status_code for _ in range(6)]
    assert codes == [401] * 5 + [429]
    assert c.get("/v1/health").status_code == 429  # public paths count in the same window
    assert app.test_client().get("/v1/health", headers=keyed[1]).status_code == 200  # not with a key


def test_a_valid_key_does_not_spend_the_address_window(keyed):
    app, good = keyed
    c = app.test_client()
    assert all(c.get("/v1/jobs", headers=good).status_code == 200 for _ in range(10))
    assert c.get("/v1/jobs", headers=WRONG).status_code == 401


def test_a_forwarded_for_header_from_a_tcp_client_is_ignored(keyed):
    app, _ = keyed
    c = app.test_client()
    codes = [c.get("/v1/jobs", headers={**WRONG, "X-Forwarded-For": f"10.0.0.{i}"}).status_code
             for i in range(6)]
    assert codes[-1] == 429  # one window: the peer address, whatever the header claims


def test_behind_the_front_each_forwarded_address_has_its_own_window(keyed):
    app, _ = keyed
    c = app.test_client()
    unix = {"REMOTE_ADDR": ""}  # a request over the front's unix socket has no peer address
    for _ in range(5):
        c.get("/v1/jobs", headers={**WRONG, "X-Forwarded-For": "10.0.0.1"}, environ_overrides=unix)
    assert c.get("/v1/jobs", headers={**WRONG, "X-Forwarded-For": "10.0.0.1"},
                 environ_overrides=unix).status_code == 429
    assert c.get("/v1/jobs", headers={**WRONG, "X-Forwarded-For": "10.0.0.2"},
                 environ_overrides=unix).status_code == 401


def test_health_shows_worker_hosts_only_to_a_key(keyed, store):
    app, good = keyed
    store.worker_beat("stifflane-4242@labhost", {"name": "stifflane-4242@labhost", "host": "labhost",
                                                  "pid": 4242})
    c = app.test_client()
    anon = c.get("/v1/health")
    assert anon.status_code == 200
    body = anon.get_json()
    assert body["worker_count"] >= 1 and "workers" not in body
    assert b"labhost" not in anon.data and b"4242" not in anon.data
    mine = c.get("/v1/health", headers=good).get_json()
    assert any(w.get("host") == "labhost" for w in mine["workers"]) and mine["worker_count"] >= 1


@pytest.mark.parametrize("param", ["key", "api_key", "KEY", "Key", "auth", "bearer", "token",
                                   "access-token", "access_token", "password", "apiKey", "X-API-KEY",
                                   "secret", "session_id"])
@pytest.mark.parametrize("path", ["/v1/jobs", "/v1/health", "/v1/openapi.json", "/"])
def test_any_credential_like_query_parameter_is_refused(keyed, param, path):
    app, good = keyed
    r = app.test_client().get(f"{path}?{param}=x", headers=good)
    assert r.status_code == 400 and r.get_json()["type"].endswith("key-in-url")


def test_a_key_under_an_innocent_name_is_refused_too(keyed):
    app, good = keyed
    key = good["Authorization"].split()[1]
    assert app.test_client().get(f"/v1/jobs?q={key}", headers=good).status_code == 400


def test_the_api_own_query_parameters_pass(keyed):
    app, good = keyed
    c = app.test_client()
    assert c.get("/v1/jobs?state=queued&limit=5", headers=good).status_code == 200
    assert c.get("/v1/jobs?cursor=", headers=good).status_code in (200, 400)
