"""/metrics through the test client on a real Redis: access, names, figures; the JSON log format."""
import dataclasses
import json
import logging

import pytest
from prometheus_client.parser import text_string_to_metric_families

from jobs import accounts, logs
from jobs import metrics as job_metrics
from jobs.settings import Settings
from service.access_log import request_fields
from tests.service.test_jobs_api import DECAY


def make_app(settings, store, **changes):
    from service import create_app

    return create_app(dataclasses.replace(settings, **changes), store=store)


def samples(text: str) -> dict:
    out = {}
    for family in text_string_to_metric_families(text):
        for s in family.samples:
            out[(s.name, tuple(sorted(s.labels.items())))] = s.value
    return out


def test_metrics_need_an_admin_key_by_default(settings, store):
    app = make_app(settings, store, auth_mode="keys")
    c = app.test_client()
    _, user = accounts.create_key(store.r, store.keys, "uma", "user")
    _, admin = accounts.create_key(store.r, store.keys, "ops", "admin")
    r = c.get("/metrics")
    assert r.status_code == 401 and r.headers["WWW-Authenticate"].startswith("Bearer")
    assert c.get("/metrics", headers={"Authorization": f"Bearer {user}"}).status_code == 403
    r = c.get("/metrics", headers={"Authorization": f"Bearer {admin}"})
    assert r.status_code == 200 and r.headers["Content-Type"] == "text/plain; version=0.0.4; charset=utf-8"


def test_metrics_can_be_public_or_off(settings, store):
    public = make_app(settings, store, auth_mode="keys", metrics_access="public")
    assert public.test_client().get("/metrics").status_code == 200
    doc = public.test_client().get("/v1/openapi.json").get_json()
    assert doc["paths"]["/metrics"]["get"]["security"] == []
    off = make_app(settings, store, auth_mode="keys", metrics_access="off")
    assert off.test_client().get("/metrics").status_code == 404
    assert "/metrics" not in off.test_client().get("/v1/openapi.json").get_json()["paths"]


def test_names_follow_prometheus_conventions(client):
    text = client.get("/metrics").get_data(as_text=True)
    families = {f.name: f for f in text_string_to_metric_families(text)}
    assert families and all(name.startswith("stifflane_") for name in families)
    for family in families.values():
        if family.type == "counter":
            assert all(s.name.endswith("_total") for s in family.samples)
        if family.type == "histogram":
            assert family.name.endswith("_seconds")
    for name in ("stifflane_jobs", "stifflane_queue_messages", "stifflane_jobs_finished",
                 "stifflane_batch_members_finished", "stifflane_job_solve_seconds", "stifflane_job_wait_seconds"):
        assert name in families, name


def test_a_finished_job_is_counted_with_its_solve_and_wait_times(client, store):
    from jobs.keys import created_at

    rec = store.create(DECAY, title="t", method="auto", owner="local")
    status, attempt = store.claim(rec.id)
    assert status == "claimed"
    assert store.finish(rec.id, attempt, "failed", "max_steps", "too many steps", {}, None)
    job_metrics.job_finished(store.r, store.keys, rec.id)
    m = samples(client.get("/metrics").get_data(as_text=True))
    assert m[("stifflane_jobs_finished_total", (("outcome", "max_steps"), ("state", "failed")))] == 1
    assert m[("stifflane_job_solve_seconds_count", ())] == 1
    assert m[("stifflane_job_wait_seconds_count", ())] == 1
    assert m[("stifflane_job_solve_seconds_bucket", (("le", "+Inf"),))] == 1
    started = store.get(rec.id).started
    assert m[("stifflane_job_wait_seconds_sum", ())] == pytest.approx(started - created_at(rec.id), abs=1e-3)
    buckets = [v for (name, _), v in m.items() if name == "stifflane_job_wait_seconds_bucket"]
    assert buckets == sorted(buckets)  # cumulative
    assert m[("stifflane_jobs", (("state", "failed"),))] == 1


def test_members_are_counted_by_outcome_and_odd_labels_are_bounded(client, store):
    job_metrics.chunk_finished(store.r, store.keys, ["succeeded"] * 7 + ["max_steps"] * 2 + ["Weird Label!"])
    m = samples(client.get("/metrics").get_data(as_text=True))
    members = {dict(k[1])["outcome"]: v for k, v in m.items() if k[0] == "stifflane_batch_members_finished_total"}
    assert members == {"succeeded": 7, "max_steps": 2, "other": 1}
    assert m[("stifflane_batch_chunks_finished_total", ())] == 1


def test_a_scrape_without_redis_says_so_and_recording_never_raises(settings):
    from service import create_app

    down = dataclasses.replace(settings, redis_url="redis://127.0.0.1:1/0", redis_timeout_seconds=0.2)
    app = create_app(down)
    r = app.test_client().get("/metrics")
    assert r.status_code == 200 and samples(r.get_data(as_text=True)) == {("stifflane_store_up", ()): 0.0}
    store = app.extensions["stifflane"].store
    job_metrics.job_finished(store.r, store.keys, "0" * 28)
    job_metrics.chunk_finished(store.r, store.keys, ["succeeded"])


def test_the_metric_keys_are_bounded(store):
    for i in range(300):
        job_metrics.chunk_finished(store.r, store.keys, [f"outcome_{i % 5}", f"Bad {i}"])
    assert store.r.hlen(store.keys.metrics_counts()) <= 7
    assert store.r.ttl(store.keys.metrics_counts()) == -1  # bounded by size, not by time


# ---- structured logs (jobs/logs.py, service/access_log.py)

def test_json_lines_carry_the_job_in_scope():
    record = logging.LogRecord("worker.run_job", logging.INFO, __file__, 1, "job %s not claimed: %s",
                               ("abc", "succeeded"), None)
    with logs.job_scope(job_id="0661df5865b909dc40fc6cb57e7d"):
        line = logs.JsonFormatter().format(record)
    obj = json.loads(line)
    assert "\n" not in line
    assert obj["message"] == "job abc not claimed: succeeded" and obj["level"] == "info"
    assert obj["job_id"] == "0661df5865b909dc40fc6cb57e7d" and obj["ts"].endswith("Z")
    assert "job_id" not in json.loads(logs.JsonFormatter().format(record))  # out of scope


def test_json_lines_keep_exceptions_on_one_line():
    try:
        raise ValueError("boom\nsecond line")
    except ValueError:
        import sys

        record = logging.LogRecord("x", logging.ERROR, __file__, 1, "failed", (), sys.exc_info())
    line = logs.JsonFormatter().format(record)
    assert "\n" not in line and "ValueError: boom" in json.loads(line)["exception"]


def test_request_lines_name_the_job_and_drop_the_query():
    job = "0661df5865b909dc40fc6cb57e7d"
    fields = request_fields("GET", f"/v1/jobs/{job}/result", "200 OK", 120, 1500, "127.0.0.1")
    assert fields["job_id"] == job and fields["status"] == 200 and fields["duration_ms"] == 1.5
    created = request_fields("POST", "/v1/batches", "202 ACCEPTED", 10, 100, "::1", location=f"/v1/batches/{job}")
    assert created["batch_id"] == job and "job_id" not in created
    assert "?" not in request_fields("GET", "/v1/jobs", "200 OK", 1, 1, "-")["path"]


def test_the_log_format_is_text_unless_json_is_asked_for(monkeypatch):
    monkeypatch.delenv("STIFFLANE_LOG_FORMAT", raising=False)
    assert logs.log_format() == "text"
    monkeypatch.setenv("STIFFLANE_LOG_FORMAT", "JSON")
    assert logs.log_format() == "json"
    monkeypatch.setenv("STIFFLANE_LOG_FORMAT", "xml")
    assert logs.log_format() == "text"


def test_the_metrics_setting_is_read_from_the_environment(monkeypatch):
    monkeypatch.setenv("STIFFLANE_METRICS_ACCESS", "public")
    assert Settings.from_env().metrics_access == "public"
