"""The dashboard's pages and assets are served by the app and need nothing from outside."""
import json
import re
from pathlib import Path

import pytest

from tests.conftest import example_path

STATIC = Path(__file__).resolve().parents[2] / "service" / "static"
TEMPLATES = Path(__file__).resolve().parents[2] / "service" / "templates"


def pages() -> list[Path]:
    found = sorted(TEMPLATES.glob("*.html"))
    assert len(found) >= 6, "the dashboard's page templates moved: update TEMPLATES"
    return found


def scripts() -> list[Path]:
    found = sorted(STATIC.glob("*.js"))
    assert len(found) >= 8, "the dashboard's scripts moved: update STATIC"
    return found
PAGES = ["/", "/submit", "/jobs/0123456789abcdef0123456789ab", "/batches", "/batches/0123456789abcdef0123456789ab"]


@pytest.mark.parametrize("path", PAGES)
def test_pages_are_html_and_never_cached_stale(client, path):
    resp = client.get(path)
    assert resp.status_code == 200 and resp.mimetype == "text/html"
    assert resp.headers["Cache-Control"] == "no-cache"
    assert b"STIFFLANE" in resp.data


def test_every_page_loads_only_local_assets():
    for page in pages():
        text = page.read_text()
        refs = re.findall(r'(?:src|href)="([^"]+)"', text)
        assert refs or page.name != "base.html", page
        assert all(r.startswith("/") for r in refs), (page.name, [r for r in refs if not r.startswith("/")])
    for script in scripts():
        assert not re.search(r"https?://", script.read_text()), script.name


def test_referenced_assets_exist(client):
    checked = 0
    for page in pages():
        for ref in re.findall(r'(?:src|href)="(/ui/[^"]+)"', page.read_text()):
            assert client.get(ref).status_code == 200, (page.name, ref)
            checked += 1
    assert checked >= 6


def test_the_chart_library_is_vendored_with_its_licence():
    vendor = STATIC / "vendor" / "uplot"
    assert "MIT License" in (vendor / "LICENSE").read_text()
    assert (vendor / "uPlot.iife.min.js").stat().st_size > 10_000


def test_the_demo_spec_is_served_for_the_submit_page(client):
    resp = client.get("/ui/examples/tarnwhistle_demo.json")
    assert resp.status_code == 200 and resp.mimetype == "application/json"
    assert json.loads(resp.data) == json.loads(example_path("jobs", "tarnwhistle_demo.json").read_text())


def test_paths_outside_the_static_folders_are_not_served(client):
    assert client.get("/ui/../dashboard.py").status_code == 404
    assert client.get("/ui/examples/..%2f..%2fpyproject.json").status_code == 404
    assert client.get("/ui/nope.js").status_code == 404
