"""Driving Debian's Chromium with Playwright (no browser download): launch and page helpers."""
from __future__ import annotations

import shutil
import tempfile
from pathlib import Path

import pytest

CHROMIUM = "/usr/bin/chromium"
ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
        "--disable-background-networking", "--disable-component-update", "--disable-sync"]
SIZES = {"laptop": (1366, 768), "wide": (1920, 1080)}
ARTIFACTS = Path(__file__).resolve().parents[1] / "artifacts" / "dashboard"


def require_browser():
    if not Path(CHROMIUM).exists():
        pytest.skip(f"{CHROMIUM} is missing (apt-get install chromium); browser tests need it")
    return pytest.importorskip("playwright.sync_api", reason="pip install playwright (no browser download needed)")


class Browser:
    """One persistent Chromium context with a fresh profile; console errors are collected."""

    def __init__(self, pw, size: str):
        self.profile = tempfile.mkdtemp(prefix="stifflane-chromium-")
        width, height = SIZES[size]
        self.size = size
        self.ctx = pw.chromium.launch_persistent_context(
            self.profile, executable_path=CHROMIUM, args=ARGS, headless=True,
            viewport={"width": width, "height": height}, accept_downloads=True)
        self.errors: list[str] = []
        self.page = self.ctx.new_page()
        self.page.on("console", self._console)
        self.page.on("pageerror", lambda e: self.errors.append(f"page error: {e}"))

    def _console(self, msg):
        if msg.type != "error":
            return
        url = (msg.location or {}).get("url", "")
        if "/v1/spec-checks" in url and "422" in msg.text:
            return  # the submit page's check of a spec that is invalid on purpose
        if "/result" in url and "409" in msg.text:
            return  # a job page asking for a running job's snapshot before there is one (result-not-ready)
        self.errors.append(f"{msg.text} ({url})")

    def shot(self, name: str) -> Path:
        ARTIFACTS.mkdir(parents=True, exist_ok=True)
        path = ARTIFACTS / f"{name}-{self.size}.png"
        self.page.screenshot(path=str(path), full_page=True)
        return path

    def close(self):
        self.ctx.close()
        shutil.rmtree(self.profile, ignore_errors=True)
