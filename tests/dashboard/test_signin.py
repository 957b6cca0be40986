"""With API keys required: the dashboard's sign-in, and the client and command line with a key."""
import os
import signal
import subprocess
import time
import uuid

import pytest
import requests

from cli import common
from cli.main import api_command, main as cli_main
from stifflane_client import AuthError, Client
from tests.conftest import ROOT, free_port
from tests.dashboard.browser import Browser, require_browser

pytestmark = pytest.mark.e2e


@pytest.fixture(scope="module")
def keyed_api(redis_server):
    """An API process with STIFFLANE_AUTH_MODE=keys (no worker: nothing here runs a job)."""
    from jobs import accounts
    from jobs.settings import Settings
    from jobs.store import JobStore

    prefix = f"k{uuid.uuid4().hex[:8]}"
    env = dict(os.environ, REDIS_URL=redis_server.url, STIFFLANE_KEY_PREFIX=prefix,
               STIFFLANE_AUTH_MODE="keys", PYTHONPATH=str(ROOT))
    port = free_port()
    log = open(ROOT / "var" / "test-logs" / f"keyed-api-{port}.log", "ab")
    proc = subprocess.Popen(api_command("127.0.0.1", port, workers=1), env=env, cwd=ROOT, stdout=log,
                            stderr=subprocess.STDOUT, start_new_session=True)
    base = f"http://127.0.0.1:{port}"
    for _ in range(150):
        try:
            requests.get(base + "/v1/health", timeout=2)
            break
        except requests.RequestException:
            time.sleep(0.2)
    settings = Settings(redis_url=redis_server.url, key_prefix=prefix)
    store = JobStore.connect(settings)
    _, key = accounts.create_key(store.r, store.keys, "alice", "user", label="sign-in test")
    yield base, key
    os.killpg(proc.pid, signal.SIGTERM)
    proc.wait(15)


def test_the_client_raises_auth_error_without_a_key_and_works_with_one(keyed_api, monkeypatch):
    base, key = keyed_api
    monkeypatch.delenv("STIFFLANE_KEY", raising=False)
    with pytest.raises(AuthError) as info:
        list(Client(base).jobs())
    assert info.value.status == 401
    assert list(Client(base, key=key).jobs()) == []


def test_the_command_line_exits_6_without_a_key(keyed_api, monkeypatch, capsys):
    base, key = keyed_api
    monkeypatch.delenv("STIFFLANE_KEY", raising=False)
    assert cli_main(["list", "--server", base]) == common.AUTH
    assert "STIFFLANE_KEY" in capsys.readouterr().err
    monkeypatch.setenv("STIFFLANE_KEY", key)
    assert cli_main(["list", "--server", base]) == common.OK


def test_the_dashboard_asks_once_keeps_the_key_for_the_session_and_sends_it(keyed_api):
    base, key = keyed_api
    sync_api = require_browser()
    with sync_api.sync_playwright() as pw:
        b = Browser(pw, "laptop")
        try:
            sent = []
            b.page.on("request", lambda r: sent.append(r.headers.get("authorization"))
                      if "/v1/jobs" in r.url else None)
            b.page.goto(base + "/")
            b.page.wait_for_selector("#signin[open]", timeout=15_000)
            b.shot("signin")
            b.page.fill("#signin input", key)
            b.page.click("#signin button[value=ok]")
            b.page.wait_for_selector("#live:has-text('updated')", timeout=15_000)
            assert b.page.evaluate("() => sessionStorage.getItem('stifflane.key')") == key
            assert b.page.evaluate("() => Object.keys(localStorage).length") == 0
            assert f"Bearer {key}" in sent
            assert key not in b.page.url
            assert not b.page.is_visible("#signin")
        finally:
            b.close()
