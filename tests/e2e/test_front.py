"""The front (nginx, cli/front.py) on the real test stack: slow clients, its own answers, logs."""
import time

import pytest
import requests

from tests.conftest import ROOT
from tests.e2e.slow_clients import Trickle, health_seconds

pytestmark = pytest.mark.e2e

PROBLEM = "application/problem+json"


def test_health_answers_while_ten_clients_trickle_a_body(stack):
    # Ten connections send a request head and then one body byte a second. Without a front
    # they took every gunicorn thread and /v1/health did not answer within 45 s (measured);
    # behind nginx it answers in milliseconds. 10 s is a bound for a loaded CI machine.
    with Trickle(stack.base, clients=10):
        time.sleep(3)  # every slow request has reached the front and sent a few bytes
        took = health_seconds(stack.base, timeout=10)
        assert took is not None, "/v1/health did not answer within 10 s while clients trickled"
        assert requests.get(stack.base + "/v1/jobs", timeout=10).status_code == 200


def test_the_front_answers_an_overlong_request_line_with_problem_json(stack):
    r = requests.get(stack.base + "/v1/jobs?state=" + "q" * 6000, timeout=10)
    assert r.status_code == 414 and r.headers["Content-Type"] == PROBLEM
    assert r.json()["status"] == 414


def test_the_front_answers_an_overlong_header_with_problem_json(stack):
    r = requests.get(stack.base + "/v1/health", headers={"X-Padding": "p" * 6000}, timeout=10)
    assert r.status_code == 431 and r.headers["Content-Type"] == PROBLEM
    assert r.json()["title"] == "Request Header Fields Too Large"


def test_the_fronts_own_pages_are_not_reachable_and_api_404s_pass_through(stack):
    r = requests.get(stack.base + "/.front/413", timeout=10)
    assert r.status_code == 404 and r.headers["Content-Type"] == PROBLEM
    r = requests.get(stack.base + "/v1/jobs/0123456789abcdef0123456789ab", timeout=10)
    assert r.status_code == 404 and r.json()["instance"] == "/v1/jobs/0123456789abcdef0123456789ab"


def test_many_small_headers_pass_the_front_and_gunicorn(stack):
    headers = {f"X-H{i}": "v" for i in range(150)}  # above gunicorn's default of 100 fields
    assert requests.get(stack.base + "/v1/health", headers=headers, timeout=10).status_code == 200


@pytest.mark.parametrize("chunked", [False, True])
def test_a_body_over_the_limit_is_413_problem_json_stating_the_limit(stack, chunked):
    body = b"{" + b" " * (3 * 1024 * 1024) + b"}"
    data = (body[i:i + 65536] for i in range(0, len(body), 65536)) if chunked else body
    r = requests.post(stack.base + "/v1/jobs", data=data, timeout=30,
                      headers={"Content-Type": "application/json"})
    assert r.status_code == 413 and r.headers["Content-Type"] == PROBLEM
    assert "2097152 bytes" in r.json()["detail"] and r.json()["limit_bytes"] == 2097152  # as the API says it


def test_a_chunked_body_under_the_limit_reaches_the_api_whole(stack):
    from tests.e2e.test_stack import linear_spec
    import json

    body = json.dumps(linear_spec()).encode() + b" " * 100_000
    r = requests.post(stack.base + "/v1/jobs", data=(body[i:i + 8192] for i in range(0, len(body), 8192)),
                      headers={"Content-Type": "application/json"}, timeout=30)
    assert r.status_code == 202, r.text


def test_neither_log_keeps_query_strings(stack):
    marker = "qsmarker7341"
    requests.get(f"{stack.base}/v1/jobs?limit=5&cursor={marker}", timeout=10)
    requests.get(f"{stack.base}/v1/health?probe={marker}", timeout=10)
    requests.get(f"{stack.base}/?q={marker}", timeout=10)
    time.sleep(1)  # both servers write a line per request as it ends
    logs = ROOT / "var" / "test-logs"
    front_log = (logs / f"front-{stack.port}.log").read_text(errors="replace")
    api_log = (logs / f"api-{stack.port}.log").read_text(errors="replace")
    assert "GET /v1/jobs HTTP/1.1" in front_log and "GET /v1/jobs HTTP/1.1" in api_log
    assert marker not in front_log and marker not in api_log


@pytest.fixture(scope="module")
def keyed_front(redis_server, tmp_path_factory):
    """The API behind the front with keys required and a small address window (no worker)."""
    import os
    import signal
    import subprocess
    import uuid

    from cli import front
    from tests.conftest import free_port

    env = dict(os.environ, REDIS_URL=redis_server.url, STIFFLANE_KEY_PREFIX=f"f{uuid.uuid4().hex[:8]}",
               STIFFLANE_AUTH_MODE="keys", STIFFLANE_ADDRESS_RATE_LIMIT="3", PYTHONPATH=str(ROOT))
    port = free_port()
    log = open(ROOT / "var" / "test-logs" / f"keyed-front-{port}.log", "ab")

    def spawn(name, cmd):
        return subprocess.Popen(cmd, env=env, cwd=ROOT, stdout=log, stderr=subprocess.STDOUT,
                                start_new_session=True)

    procs = front.start_api("127.0.0.1", port, spawn, workers=1, front_dir=tmp_path_factory.mktemp("front"))
    base = f"http://127.0.0.1:{port}"
    deadline = time.time() + 30
    while time.time() < deadline:
        try:
            requests.get(base + "/ui/app.css", timeout=2)
            break
        except requests.RequestException:
            time.sleep(0.2)
    yield base
    for _, p in reversed(procs):
        os.killpg(p.pid, signal.SIGTERM)
        p.wait(15)


def test_behind_the_front_wrong_keys_are_limited_by_the_real_client_address(keyed_front):
    import socket

    wrong = {"Authorization": "Bearer slk_00000000_" + "A" * 43}
    # The client's own X-Forwarded-For is replaced by the front: forging it does not escape.
    codes = [requests.get(keyed_front + "/v1/jobs", timeout=10,
                          headers={**wrong, "X-Forwarded-For": f"10.1.1.{i}"}).status_code for i in range(5)]
    assert codes == [401, 401, 401, 429, 429]

    # Another client address (127.0.0.2 over loopback) has a window of its own.
    with socket.create_connection(("127.0.0.1", int(keyed_front.rsplit(":", 1)[1])), timeout=10,
                                  source_address=("127.0.0.2", 0)) as s:
        s.sendall(b"GET /v1/jobs HTTP/1.1\r\nHost: x\r\nConnection: close\r\n"
                  b"Authorization: Bearer slk_00000000_" + b"A" * 43 + b"\r\n\r\n")
        head = s.recv(200).decode()
    assert head.startswith("HTTP/1.1 401"), head
