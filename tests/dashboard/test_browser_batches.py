"""The sweep pages in a real browser on the live stack: progress, scatter, histograms,
a sortable member table and the failed members with their messages."""
import json

import pytest

from tests.client.batch_specs import BLOWUP
from tests.conftest import example_path

pytestmark = pytest.mark.e2e


def tarnwhistle_sweep() -> dict:
    """Invented demo sweep over the Tarnwhistle scenario: gas transfer rate x feed rate (24 members)."""
    base = json.loads(example_path("jobs", "tarnwhistle_demo.json").read_text())
    base.pop("label")
    return {"label": "Invented demo sweep: Tarnwhistle transfer rate x feed rate", "base": base,
            "grid": {"parameters": {"kLa": {"from": 0.02, "to": 0.12, "count": 6},
                                    "feed_rate": [0.0005, 0.001, 0.002, 0.004]}},
            "summaries": [{"kind": "final", "of": "P"}, {"kind": "final", "of": "Byp"},
                          {"kind": "integral", "of": "r1"}]}


def submit(stack, spec) -> str:
    import requests

    r = requests.post(stack.base + "/v1/batches", json=spec, timeout=30)
    assert r.status_code == 202, r.text
    return r.json()["id"]



def test_a_sweep_page_shows_progress_scatter_histograms_and_sorts(browser, stack):
    batch_id = submit(stack, tarnwhistle_sweep())
    page = browser.page
    page.goto(f"{stack.base}/batches/{batch_id}")
    page.wait_for_selector(".state.succeeded", timeout=180_000)
    page.wait_for_function("() => document.querySelectorAll('#members tbody tr').length === 24", timeout=30_000)
    assert page.inner_text("#progress-text").startswith("24 of 24 members done")
    assert page.is_visible("#scatter .uplot")
    assert len(page.query_selector_all("#hists .uplot")) == 3
    page.select_option("#scatter-x", "feed_rate")
    page.click("[data-axis=scx] [data-v=log]")
    assert page.evaluate("() => SLBatch.charts().scatter.scales.x.distr") == 3
    page.click("#members th[data-col=final_P]")
    page.click("#members th[data-col=final_P]")  # second click: descending
    values = page.eval_on_selector_all("#members tbody tr", "rows => rows.map(r => r.children[3].textContent)")
    finals = [float(v) for v in values]
    assert finals == sorted(finals, reverse=True)
    browser.shot("batch")
    page.goto(f"{stack.base}/batches")
    page.wait_for_selector(f"tr[data-id='{batch_id}']")
    browser.shot("batches")
    assert browser.errors == []


def test_failed_members_are_listed_with_their_messages(browser, stack):
    batch_id = submit(stack, BLOWUP)
    page = browser.page
    page.goto(f"{stack.base}/batches/{batch_id}")
    page.wait_for_selector("#failed li", timeout=180_000)
    item = page.inner_text("#failed li")
    assert "member 3" in item and len(item.splitlines()) >= 2
    page.check("#only-failed")
    assert len(page.query_selector_all("#members tbody tr")) == 1
    assert browser.errors == []
