"""The job page's sensitivities and ranking in a real browser on the live stack: one line per θ
for a chosen state, normalised or raw; per ranked output a signed, sorted bar chart and a table
with the reactions named; the ranking CSV; cards hidden for a job without sensitivities."""
import csv
import io

import pytest
import requests

pytestmark = pytest.mark.e2e

# A -> B -> C first order with a reversible side step: B's maximum depends on k1/k2 only, so
# its normalised sensitivities to k1 and k2 are equal and opposite (signed bars both ways).
CHAIN = {
    "label": "chain with a ranking",
    "model": {"states": {"A": {"initial": 1.0, "unit": "mol/L"}, "B": 0.0, "C": 0.0, "D": 0.0},
              "parameters": {"k1": 0.8, "k2": 0.3, "kf": 0.05, "kb": 0.02},
              "reactions": [{"name": "first", "equation": "A -> B", "k": "k1"},
                            {"name": "second", "equation": "B -> C", "k": "k2"},
                            {"name": "side", "equation": "C <=> D", "k": "kf", "k_reverse": "kb"}]},
    "span": [0.0, 12.0], "output": {"count": 121}, "tolerance": {"rtol": 1e-9, "atol": 1e-12},
    "sensitivity": {"parameters": ["k1", "k2", "kf", "kb"], "initial": ["A"],
                    "rank": [{"state": "B", "summary": "max"},
                             {"state": "C", "summary": "crossing", "value": 0.5},
                             {"state": "D", "summary": "final"},
                             {"state": "B", "summary": "crossing", "value": 9.0}]},
}
PLAIN = {"label": "no sensitivities", "model": {"states": {"x": 1.0}, "ddt": {"x": "-x"}}, "span": [0.0, 5.0]}


def open_job(browser, stack, spec) -> tuple[str, dict]:
    job_id = stack.submit(spec)
    assert stack.wait(job_id, timeout=180)["state"] == "succeeded"
    browser.page.goto(f"{stack.base}/jobs/{job_id}")
    browser.page.wait_for_selector("#traj .uplot", timeout=30_000)
    return job_id, requests.get(f"{stack.base}/v1/jobs/{job_id}/result", timeout=10).json()


def drawn(page, k: int) -> list:
    return page.evaluate(f"() => SLJob.charts().sens.data[{k}]")


def test_sensitivities_are_drawn_normalised_or_raw_for_a_chosen_state(browser, stack):
    _, body = open_job(browser, stack, CHAIN)
    page = browser.page
    page.wait_for_selector("#sens .uplot")
    sens = body["sensitivity"]
    # the first ranked output's state opens; one line per θ, in the result's order
    assert page.input_value("#sens-state") == "B"
    labels = page.evaluate("() => SLJob.charts().sens.series.slice(1).map(s => s.label)")
    assert labels == sens["wrt"] == ["k1", "k2", "kf", "kb", "init:A"]
    assert drawn(page, 1) == sens["normalised"]["B"]["k1"]  # null at t = 0, where B = 0
    assert "on" in page.get_attribute("[data-axis=sk] [data-v=normalised]", "class")
    assert "blank where B or θ is 0" in page.inner_text("#sens-note")
    page.click("[data-axis=sk] [data-v=raw]")
    assert drawn(page, 2) == sens["raw"]["B"]["k2"]
    assert "d B / dθ" not in page.inner_text("#sens") and "per unit change" in page.inner_text("#sens-note")
    page.select_option("#sens-state", "A")
    assert drawn(page, 5) == sens["raw"]["A"]["init:A"]
    assert page.evaluate("() => SLJob.charts().sens.axes[1].label").startswith("dA / dθ [mol/L")
    page.click("[data-axis=tx] [data-v=log]")  # the time axis follows the trajectories'
    assert page.evaluate("() => SLJob.charts().sens.scales.x.distr") == 3
    assert page.input_value("#sens-state") == "A"
    browser.shot("job-sensitivities")
    assert browser.errors == []


def test_the_ranking_shows_signed_sorted_bars_and_a_table_per_output(browser, stack):
    job_id, body = open_job(browser, stack, CHAIN)
    page = browser.page
    page.wait_for_selector("#rank-card:not(.hidden) .rank-output")
    ranking = body["sensitivity"]["ranking"]
    blocks = page.query_selector_all("#ranking .rank-output")
    assert len(blocks) == 4
    titles = [b.query_selector("h3").inner_text() for b in blocks]
    assert titles[0].startswith("max B — value") and titles[1].startswith("crossing C=0.5 — delay")
    for block, out in zip(blocks[:3], ranking):
        rows = block.query_selector_all(".rank-row")
        entries = [e for e in out["entries"] if e["normalised"] is not None or e["raw"] is not None]
        assert [r.get_attribute("data-wrt") for r in rows] == [e["wrt"] for e in entries]  # sorted as served
        widths = [r.evaluate("r => { const i = r.querySelector('i'); return i ? parseFloat(i.style.width) : 0 }")
                  for r in rows]
        assert widths[0] == 100 and widths == sorted(widths, reverse=True)  # set from data-w by SL.paint
        for row, e in zip(rows, entries):  # the bar's side is the sign
            side = "neg" if (e["normalised"] or 0) < 0 else "pos"
            assert row.query_selector(f".rank-{side} > i") is not None or not e["normalised"]
        table = block.query_selector_all("tbody tr")
        assert [t.query_selector_all("td")[1].inner_text() for t in table] == [e["wrt"] for e in entries]
    # max B: k1 up and k2 down by the same amount, reactions named beside their rate constants
    peak = {r.get_attribute("data-wrt"): r for r in blocks[0].query_selector_all(".rank-row")}
    assert peak["k1"].query_selector(".rank-pos > i") and peak["k2"].query_selector(".rank-neg > i")
    assert "first" in peak["k1"].inner_text() and "second" in peak["k2"].inner_text()
    side = {r.get_attribute("data-wrt"): r.inner_text() for r in blocks[2].query_selector_all(".rank-row")}
    assert "side" in side["kf"] and "side (reverse)" in side["kb"]
    # B never reaches 9: a note instead of bars
    assert "does not pass 9" in blocks[3].inner_text() and not blocks[3].query_selector(".rank-row")
    with page.expect_download() as info:
        page.click("#rank-csv")
    assert info.value.suggested_filename == f"{job_id}-ranking.csv"
    caution, *rows = list(csv.reader(io.StringIO(open(info.value.path()).read())))
    assert caution[0].startswith("# caution: ") and rows[0][:3] == ["output", "state", "summary"]
    assert rows[1][0] == "max B" and rows[1][6] == ranking[0]["entries"][0]["wrt"]
    browser.shot("job-ranking")
    assert browser.errors == []


def test_a_job_without_sensitivities_shows_neither_card(browser, stack):
    open_job(browser, stack, PLAIN)
    page = browser.page
    assert page.is_hidden("#sens-card") and page.is_hidden("#rank-card")
    assert browser.errors == []
