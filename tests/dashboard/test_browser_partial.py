"""Runs that stopped early and runs still going, on the job page in a real browser.

The result of a failed, cancelled or running job follows the contract of issue 16 (partial
true, t_reached, state, units; 200 for a running job once it has a snapshot). Where the server
under test answers it, the tests read it from the live stack; the tests marked "contract" serve
a result of that shape to the page (built from a real run of the same model, cut where the
failed run stopped), so the page is checked against the contract whatever the server does.
"""
import json
import time

import pytest
import requests

pytestmark = pytest.mark.e2e

# y' = y^2, y(0) = 1 blows up at t = 1: over [0, 2] the run fails about half-way.
BLOWUP_MODEL = {"title": "quadratic growth", "states": {"y": {"initial": 1.0, "unit": "mol/L"}}, "ddt": {"y": "y * y"}}
BLOWUP = {"label": "blow-up at t = 1 (partial)", "model": BLOWUP_MODEL, "span": [0.0, 2.0], "output": {"count": 21},
          "tolerance": {"rtol": 1e-9, "atol": 1e-12}, "limits": {"max_steps": 20000, "max_wall_seconds": 30}}
# the same model over the part of the span the failed run got through
BEFORE = dict(BLOWUP, label="blow-up, the part before t = 0.9", span=[0.0, 0.9], output={"count": 10})

OSC_MODEL = {"states": {"u": 1.0, "v": 0.0}, "ddt": {"u": "v", "v": "-u"}}
LONG = {"label": "long oscillator (live plots)", "model": OSC_MODEL, "span": [0.0, 1.0e7], "output": {"count": 3},
        "tolerance": {"rtol": 1e-12, "atol": 1e-14}, "method": "dormand_prince_54",
        "limits": {"max_steps": 100_000_000, "max_wall_seconds": 120}}
LONG_START = dict(LONG, label="oscillator, the first 50 time units", span=[0.0, 50.0], output={"count": 201})


def result_of(stack, job_id) -> requests.Response:
    return requests.get(f"{stack.base}/v1/jobs/{job_id}/result", timeout=30)


def succeeded_result(stack, spec) -> dict:
    job_id = stack.submit(spec)
    assert stack.wait(job_id, timeout=120)["state"] == "succeeded"
    return result_of(stack, job_id).json()


def cut(res: dict, rows: int, **fields) -> dict:
    """A result cut after ``rows`` output rows, with the contract's partial fields."""
    out = dict(res, times=res["times"][:rows],
               states={k: v[:rows] for k, v in res["states"].items()},
               derived={k: v[:rows] for k, v in res["derived"].items()},
               partial=True, t_reached=res["times"][rows - 1])
    hist = (res["report"] or {}).get("step_history")
    if hist:
        keep = sum(1 for t in hist["t"] if t <= out["t_reached"])
        out["report"] = dict(res["report"], step_history={k: (v[:keep] if isinstance(v, list) else v) for k, v in hist.items()})
    out.update(fields)
    return out


def serve(page, job_id, body):
    """The page's JSON reads of the job's result get ``body()`` (downloads go to the server)."""
    def handle(route):
        if "format=" in route.request.url:
            return route.continue_()
        return route.fulfill(status=200, content_type="application/json", headers={"Cache-Control": "no-store"},
                             body=json.dumps(body()))
    page.route(f"**/v1/jobs/{job_id}/result*", handle)


def test_contract_a_failed_run_shows_its_partial_result_once(browser, stack):
    failed_id = stack.submit(BLOWUP)
    failed = stack.wait(failed_id, timeout=120)
    assert failed["state"] == "failed"
    before = succeeded_result(stack, BEFORE)
    partial = cut(before, 10, state="failed", t_end=2.0, outcome=failed["outcome"], message=failed["message"],
                  units={"y": "mol/L"})
    page = browser.page
    serve(page, failed_id, lambda: partial)
    page.goto(f"{stack.base}/jobs/{failed_id}")
    page.wait_for_selector("#traj .uplot", timeout=30_000)
    note = page.inner_text("#partial-note")
    assert note.startswith("partial: solved up to t = 0.9 of 2; the run failed there")
    assert page.evaluate("() => SLJob.charts().traj.scales.x.max") == 2  # the whole span, the unsolved part shaded
    assert page.evaluate("() => SLJob.charts().traj.series[1].label") == "y [mol/L]"
    assert page.is_visible("#steps .uplot")  # step history
    counters = page.inner_text("#counters")
    assert "accepted steps" in counters and str(before["report"]["accepted_steps"]) in counters
    body = page.inner_text("main")
    assert body.count(failed["message"][:40]) == 1  # the message once, not twice
    assert page.is_visible("#progress-card")
    assert "failed at" in page.inner_text("#progress-text")
    assert float(page.evaluate("() => parseFloat(document.getElementById('progress-bar').style.width)")) > 0
    browser.shot("job-failed-partial")
    assert browser.errors == []


def test_a_failed_run_on_the_live_stack(browser, stack):
    failed_id = stack.submit(BLOWUP)
    failed = stack.wait(failed_id, timeout=120)
    assert failed["state"] == "failed"
    page = browser.page
    page.goto(f"{stack.base}/jobs/{failed_id}")
    page.wait_for_selector(".state.failed", timeout=30_000)
    page.wait_for_function("() => document.querySelector('#traj .uplot') || "
                           "document.querySelector('#waiting .empty').textContent.startsWith('Nothing to plot')",
                           timeout=30_000)
    assert page.inner_text("main").count(failed["message"][:40]) == 1
    if result_of(stack, failed_id).status_code == 409:
        assert "Nothing to plot" in page.inner_text("#waiting")
        pytest.skip("this server keeps no partial result of a failed run (issue 16 contract not served)")
    page.wait_for_selector("#traj .uplot", timeout=30_000)
    assert page.inner_text("#partial-note").startswith("partial: solved up to t = ")
    assert " of 2;" in page.inner_text("#partial-note")
    assert page.evaluate("() => SLJob.charts().traj.series[1].label") == "y [mol/L]"
    assert "failed at" in page.inner_text("#progress-text")
    assert browser.errors == []


def test_contract_a_running_job_draws_its_live_snapshot_and_refreshes_it(browser, stack):
    start = succeeded_result(stack, LONG_START)  # first: one worker runs one job at a time
    job_id = stack.submit(LONG)
    stack.wait(job_id, states=("running",), timeout=60)
    served = {"rows": 40, "state": "running"}

    def snapshot():
        rows = served["rows"]
        served["rows"] = min(201, rows + 40)  # each read sees the run further on
        rep = dict(start["report"], method="dormand_prince_54")
        return cut(dict(start, report=rep), rows, state=served["state"], t_end=1.0e7, outcome=None,
                   message="" if served["state"] == "running" else "cancelled on request")

    page = browser.page
    serve(page, job_id, snapshot)
    page.goto(f"{stack.base}/jobs/{job_id}")
    page.wait_for_selector("#traj .uplot", timeout=30_000)
    assert page.inner_text("#partial-note").startswith("live: solved up to t = ")
    first = page.evaluate("() => SLJob.charts().traj.data[0].length")
    page.wait_for_function(f"() => SLJob.charts().traj.data[0].length > {first}", timeout=30_000)  # refreshed with the poll
    assert page.is_visible("#steps .uplot") and page.is_visible("#progress-card")
    assert page.inner_text("#steps-note").startswith("So far ")
    assert not page.is_visible("#waiting")
    browser.shot("job-live")
    served["state"] = "cancelled"
    page.click("#cancel")
    page.wait_for_selector(".state.cancelled", timeout=60_000)
    page.wait_for_function("() => document.getElementById('partial-note').textContent.startsWith('partial:')",
                           timeout=30_000)
    assert "was cancelled" in page.inner_text("#partial-note")
    assert page.evaluate("() => SLJob.charts().traj.scales.x.max") == 1.0e7  # the whole span once it stopped
    assert "cancelled at" in page.inner_text("#progress-text")
    assert browser.errors == []


def test_a_running_job_on_the_live_stack(browser, stack):
    job_id = stack.submit(LONG)
    stack.wait(job_id, states=("running",), timeout=60)
    page = browser.page
    page.goto(f"{stack.base}/jobs/{job_id}")
    page.wait_for_selector("#progress-card:not(.hidden)", timeout=30_000)
    assert "plots appear here" in page.inner_text("#waiting")  # not "when the run has succeeded"
    deadline = time.time() + 20  # the contract: a snapshot within a few seconds of the start
    status = None
    while time.time() < deadline:
        status = result_of(stack, job_id).status_code
        if status == 200:
            break
        time.sleep(0.5)
    try:
        if status != 200:
            pytest.skip("this server serves no live snapshot of a running job (issue 16 contract not served)")
        page.wait_for_selector("#traj .uplot", timeout=30_000)
        assert page.inner_text("#partial-note").startswith("live: solved up to t = ")
    finally:
        requests.post(f"{stack.base}/v1/jobs/{job_id}/cancel", timeout=10)
        stack.wait(job_id, timeout=60)
    assert browser.errors == []
