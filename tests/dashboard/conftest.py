"""Browser fixtures for the dashboard tests: Debian's Chromium driven by Playwright, one
browser per window size (laptop and wide)."""
import pytest

from tests.dashboard.browser import SIZES, Browser, require_browser


@pytest.fixture(scope="module")
def playwright():
    sync_api = require_browser()
    with sync_api.sync_playwright() as pw:
        yield pw


@pytest.fixture(params=list(SIZES))
def browser(request, playwright):
    b = Browser(playwright, request.param)
    yield b
    b.close()
