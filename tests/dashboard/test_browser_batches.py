"""The sweep pages in a real browser on the live stack: progress, scatter, histograms,
a sortable member table and the failed members with their messages."""
import json
import time

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
    assert page.inner_text("#progress-text").startswith("24 of 24 members run — 24 succeeded, 0 failed")
    assert page.evaluate("() => Array.from(document.querySelectorAll('#progress-bar > i')).map(i => [i.className, i.style.width])") == [["ok", "100%"]]
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


# y' = k y^2, y(0) = 1 blows up at t = 1/k: over [0, 2] the three members with k >= 0.6 fail (30 %).
THIRTY_PERCENT_FAIL = {
    "label": "blow-up sweep, 3 of 10 fail (dashboard)",
    "base": {"model": {"title": "quadratic growth", "states": {"y": 1.0}, "parameters": {"k": 0.1},
                       "ddt": {"y": "k * y * y"}},
             "span": [0.0, 2.0], "output": {"count": 5}, "tolerance": {"rtol": 1e-9, "atol": 1e-12},
             "limits": {"max_steps": 20000, "max_wall_seconds": 30}},
    "grid": {"parameters": {"k": [0.05, 0.1, 0.15, 0.2, 0.25, 0.3, 0.35, 0.6, 0.8, 1.0]}},
    "summaries": [{"kind": "final", "of": "y"}],
}


def segments(page) -> dict:
    return dict(page.evaluate(
        "() => Array.from(document.querySelectorAll('#progress-bar > i')).map(i => [i.className, parseFloat(i.style.width)])"))


def test_failed_members_show_in_the_bar_and_the_scatter(browser, stack):
    batch_id = submit(stack, THIRTY_PERCENT_FAIL)
    page = browser.page
    page.goto(f"{stack.base}/batches/{batch_id}")
    page.wait_for_selector(".state.succeeded", timeout=180_000)
    page.wait_for_function("() => document.querySelectorAll('#members tbody tr').length === 10", timeout=30_000)
    assert segments(page) == {"ok": 70, "fail": 30}  # not an all-green bar
    assert page.inner_text("#progress-text").startswith("10 of 10 members run — 7 succeeded, 3 failed")
    assert "3 of 10 members that ran (30%) failed" in page.inner_text("#notices")
    page.wait_for_selector("#scatter .uplot")
    assert sorted(page.evaluate("() => SLBatch.charts().scatter._rug")) == [0.6, 0.8, 1.0]
    assert page.evaluate("() => SLBatch.charts().scatter.scales.x.max") >= 1.0  # in the drawn range
    assert page.inner_text("#scatter-note").startswith("× 3 failed members")
    browser.shot("batch-failed")
    page.goto(f"{stack.base}/batches")
    row = page.wait_for_selector(f"tr[data-id='{batch_id}']")
    assert [c.strip() for c in row.inner_text().split("\t")][3:6] == ["10", "3", "0"]
    assert row.query_selector(".bar > i.fail") is not None
    assert browser.errors == []


# 400 members of about 0.08 s each (one worker): cancelled once 10 have finished.
SLOW = {"label": "slow sweep, cancelled (dashboard)", "chunk_size": 5,
        "base": {"model": {"states": {"u": 1.0, "v": 0.0}, "parameters": {"w": 1.0}, "ddt": {"u": "v", "v": "-w*w*u"}},
                 "span": [0.0, 20000.0], "output": {"count": 3}, "tolerance": {"rtol": 1e-10, "atol": 1e-12},
                 "method": "dormand_prince_54"},
        "grid": {"parameters": {"w": {"from": 0.5, "to": 1.5, "count": 400}}},
        "summaries": [{"kind": "final", "of": "u"}]}


def test_a_cancelled_sweep_shows_its_cancelled_members(browser, stack):
    import requests

    batch_id = submit(stack, SLOW)
    deadline = time.time() + 120
    while time.time() < deadline:
        view = requests.get(f"{stack.base}/v1/batches/{batch_id}", timeout=10).json()
        if view["progress"]["succeeded"] >= 10 or view["state"] not in ("queued", "running"):
            break
        time.sleep(0.2)
    assert requests.post(f"{stack.base}/v1/batches/{batch_id}/cancel", timeout=10).status_code == 202
    page = browser.page
    page.goto(f"{stack.base}/batches/{batch_id}")
    page.wait_for_selector(".state.cancelled", timeout=120_000)
    page.wait_for_function("() => document.getElementById('progress-text').textContent.includes('cancelled')",
                           timeout=30_000)
    p = requests.get(f"{stack.base}/v1/batches/{batch_id}", timeout=10).json()["progress"]
    assert p["cancelled"] > 0 and p["succeeded"] >= 10
    seg = segments(page)
    assert seg["ok"] == pytest.approx(100 * p["succeeded"] / 400, abs=0.01) and seg["ok"] < 100
    assert seg["cancel"] == pytest.approx(100 * p["cancelled"] / 400, abs=0.01)
    text = page.inner_text("#progress-text")
    assert text.startswith(f"{p['succeeded'] + p['failed']} of 400 members run")
    assert f"{p['cancelled']} cancelled (never ran)" in text and "0 left" not in text
    assert "cancelled" in page.inner_text("#seg-legend")
    browser.shot("batch-cancelled")
    assert browser.errors == []
