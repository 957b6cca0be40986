"""The dashboard's Content-Security-Policy and framing rules: sent on every page, nothing
inline in the pages or the markup their scripts build, and enforced in a real browser."""
import re
from pathlib import Path

import pytest

from service.dashboard import PAGE_POLICY
from tests.dashboard.browser import Browser, require_browser

PAGES = ["/", "/submit", "/jobs/0123456789abcdef0123456789ab", "/batches",
         "/batches/0123456789abcdef0123456789ab"]
STATIC = Path(__file__).resolve().parents[2] / "service" / "static"


def directives(policy: str) -> dict:
    return {d.split()[0]: d.split()[1:] for d in policy.split(";") if d.strip()}


@pytest.mark.parametrize("path", PAGES)
def test_every_page_sends_a_policy_without_inline_script_or_framing(client, path):
    r = client.get(path)
    policy = directives(r.headers["Content-Security-Policy"])
    assert policy["script-src"] == ["'self'"] and policy["style-src"] == ["'self'"]
    assert policy["frame-ancestors"] == ["'none'"] and policy["default-src"] == ["'none'"]
    assert r.headers["X-Frame-Options"] == "DENY"


@pytest.mark.parametrize("path", ["/v1/health", "/v1/jobs", "/ui/app.css", "/v1/nope"])
def test_other_answers_may_not_run_anything_or_be_framed(client, path):
    r = client.get(path)
    assert directives(r.headers["Content-Security-Policy"])["default-src"] == ["'none'"]
    assert r.headers["X-Frame-Options"] == "DENY"


@pytest.mark.parametrize("path", PAGES)
def test_rendered_pages_have_no_inline_script_style_or_handler(client, path):
    html = client.get(path).get_data(as_text=True)
    scripts = re.findall(r"<script\b([^>]*)>(.*?)</script>", html, re.S)
    assert scripts and all('src="/ui/' in attrs and not body.strip() for attrs, body in scripts)
    assert "<style" not in html and not re.search(r"\sstyle\s*=", html)
    assert not re.search(r"\son[a-z]+\s*=", html) and "javascript:" not in html


def test_markup_built_by_the_scripts_has_no_style_attributes():
    for script in STATIC.glob("*.js"):
        text = script.read_text()
        assert not re.search(r"style\s*=\s*[\"']", text), script.name
        assert not re.search(r"setAttribute\(\s*['\"](style|on\w+)", text), script.name


@pytest.mark.e2e
def test_the_browser_enforces_the_policy_and_the_pages_break_none_of_it(stack):
    """Every page loads in Chromium without a policy violation; an injected inline handler
    does not run (so the policy is really in force)."""
    sync_api = require_browser()
    with sync_api.sync_playwright() as pw:
        b = Browser(pw, "laptop")
        try:
            for path in PAGES:
                b.page.goto(stack.base + path)
                b.page.wait_for_load_state("networkidle")
            assert [e for e in b.errors if "Content Security Policy" in e] == []
            b.page.goto(stack.base + "/")
            b.page.wait_for_load_state("networkidle")
            b.page.evaluate("""() => { window.__ran = false; document.body.insertAdjacentHTML('beforeend',
                '<img src="/nope.png" onerror="window.__ran = true">'); }""")
            b.page.wait_for_timeout(500)
            assert b.page.evaluate("() => window.__ran") is False
            assert any("Content Security Policy" in e for e in b.errors), b.errors
        finally:
            b.close()
