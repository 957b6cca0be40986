"""Operations on a real stack: /metrics after real jobs and a batch, answered alike by every
gunicorn process, and JSON log lines with job ids from the API and the worker.

The stack runs with STIFFLANE_LOG_FORMAT=json (a stack of its own: the shared one logs text).
"""
import json
import os
import signal
import subprocess
import time

import pytest
import requests
from prometheus_client.parser import text_string_to_metric_families

from cli.main import api_command
from tests.conftest import free_port
from tests.e2e.test_batches import robertson_batch, submit as submit_batch, wait as wait_batch
from tests.service.test_jobs_api import DECAY

pytestmark = pytest.mark.e2e


@pytest.fixture(scope="module")
def json_stack(redis_server):
    from tests.stack import Stack

    saved = os.environ.get("STIFFLANE_LOG_FORMAT")
    os.environ["STIFFLANE_LOG_FORMAT"] = "json"
    try:
        s = Stack(redis_server.url)
    finally:
        if saved is None:
            os.environ.pop("STIFFLANE_LOG_FORMAT")
        else:
            os.environ["STIFFLANE_LOG_FORMAT"] = saved
    yield s
    s.stop()


@pytest.fixture(scope="module")
def ran(json_stack):
    """Three jobs that succeed, one that fails (max_steps), one 40-member batch."""
    ok = [json_stack.submit(DECAY) for _ in range(3)]
    bad = json_stack.submit(dict(DECAY, model={**DECAY["model"], "parameters": {"k": 2000.0}},
                                 method="dormand_prince_54", limits={"max_steps": 5}))
    views = [json_stack.wait(j) for j in [*ok, bad]]
    batch = submit_batch(json_stack, robertson_batch(40, 10))
    wait_batch(json_stack, batch)
    return {"ok": ok, "bad": bad, "views": views, "batch": batch}


def scrape(base: str) -> dict:
    r = requests.get(base + "/metrics", timeout=10, headers={"Connection": "close"})
    assert r.status_code == 200 and r.headers["Content-Type"].startswith("text/plain; version=0.0.4")
    samples = {}
    for family in text_string_to_metric_families(r.text):
        for s in family.samples:
            samples[(s.name, tuple(sorted(s.labels.items())))] = s.value
    return samples


def value(samples, name, **labels):
    return samples.get((name, tuple(sorted(labels.items()))), 0.0)


def test_metrics_after_real_jobs_and_a_batch(json_stack, ran):
    bad_view = ran["views"][-1]
    assert [v["state"] for v in ran["views"]] == ["succeeded"] * 3 + ["failed"]
    m = scrape(json_stack.base)
    assert value(m, "stifflane_store_up") == 1
    assert value(m, "stifflane_jobs_finished_total", state="succeeded", outcome="succeeded") == 3
    assert value(m, "stifflane_jobs_finished_total", state="failed", outcome=bad_view["outcome"]) == 1
    assert value(m, "stifflane_jobs", state="succeeded") == 3 and value(m, "stifflane_jobs", state="queued") == 0
    assert value(m, "stifflane_job_solve_seconds_count") == 4
    assert value(m, "stifflane_job_wait_seconds_count") == 4
    assert value(m, "stifflane_job_solve_seconds_bucket", le="+Inf") == 4
    assert 0 < value(m, "stifflane_job_solve_seconds_sum") < 600  # generous: four tiny solves
    assert sum(v for (name, _), v in m.items() if name == "stifflane_batch_members_finished_total") == 40
    assert value(m, "stifflane_batch_members_finished_total", outcome="succeeded") == 40
    assert value(m, "stifflane_batch_chunks_finished_total") == 4
    assert value(m, "stifflane_batches_active") == 0
    queue = json_stack.env["STIFFLANE_INTERACTIVE_QUEUE"]
    assert value(m, "stifflane_queue_messages", queue=queue) == 0
    for (name, _), _v in m.items():
        assert name.startswith("stifflane_"), name


def test_every_gunicorn_process_answers_the_same(json_stack, ran):
    """A second API with three processes on the same Redis: all scrapes agree with the first API."""
    port = free_port()
    env = dict(json_stack.env)
    log = open(json_stack.logs / f"api3-{port}.log", "ab")
    proc = subprocess.Popen(api_command("127.0.0.1", port, workers=3), env=env, cwd=json_stack.logs.parent.parent,
                            stdout=log, stderr=subprocess.STDOUT, start_new_session=True)
    try:
        base = f"http://127.0.0.1:{port}"
        deadline = time.time() + 30
        while time.time() < deadline:
            try:
                if requests.get(base + "/v1/health", timeout=2).status_code == 200:
                    break
            except requests.RequestException:
                time.sleep(0.2)
        reference = scrape(json_stack.base)
        keep = lambda m: {k: v for k, v in m.items() if k[0] not in (  # noqa: E731
            "stifflane_scrape_duration_seconds", "stifflane_oldest_queued_job_age_seconds")}
        for _ in range(12):  # a new connection each time: gunicorn hands them to its processes
            assert keep(scrape(base)) == keep(reference)
    finally:
        os.killpg(proc.pid, signal.SIGTERM)
        proc.wait(15)


def test_the_scrape_is_cheap(json_stack, ran):
    """A handful of O(1) Redis commands in one round trip; timed here only to report it."""
    m = scrape(json_stack.base)
    assert value(m, "stifflane_scrape_duration_seconds") < 1.0  # generous: a loopback round trip


def _json_lines(path):
    lines = [line for line in path.read_text(errors="replace").splitlines() if line.strip()]
    parsed = []
    for line in lines:
        if line.startswith("{"):
            parsed.append(json.loads(line))
    return lines, parsed


def test_api_and_worker_log_json_lines_with_the_job_id(json_stack, ran):
    job = ran["ok"][0]
    api_lines, api = _json_lines(json_stack.logs / f"api-{json_stack.port}.log")
    assert api and len(api) == len(api_lines), [line for line in api_lines if not line.startswith("{")][:5]
    requests_about_job = [o for o in api if o.get("job_id") == job and "method" in o]
    assert {o["method"] for o in requests_about_job} >= {"POST", "GET"}  # created (Location) and polled
    assert all("?" not in o["path"] for o in api if "path" in o)
    worker_lines, worker = _json_lines(json_stack.logs / f"worker-{json_stack.port}.log")
    assert worker and len(worker) == len(worker_lines), [line for line in worker_lines if not line.startswith("{")][:5]
    about_job = [o for o in worker if o.get("job_id") == job]
    assert about_job, "no worker line carries the job id"
    assert any(o.get("batch_id") == ran["batch"] and "chunk" in o for o in worker)
    for o in worker + api:
        assert {"ts", "level", "logger"} <= set(o)
