"""The dashboard in a real browser on the live stack: submit, watch, plot, download.

Screenshots of every page at laptop (1366x768) and wide (1920x1080) sizes are kept in
tests/artifacts/dashboard/ (not committed).
"""
import csv
import io
import json

import pytest

from tests.conftest import example_path

pytestmark = pytest.mark.e2e
DEMO = example_path("jobs", "tarnwhistle_demo.json")



def submit_demo_from_the_page(b, base) -> str:
    page = b.page
    page.goto(base + "/submit")
    page.click("#example")
    page.wait_for_selector("#check-state:text-is('valid')", timeout=30_000)
    page.click("#submit")
    page.wait_for_url("**/jobs/*", timeout=30_000)
    return page.url.rsplit("/", 1)[1]


def test_submit_watch_plot_on_log_axes_and_download_csv(browser, stack):
    page = browser.page
    job_id = submit_demo_from_the_page(browser, stack.base)
    page.wait_for_selector(".state.succeeded", timeout=180_000)
    page.wait_for_selector("#traj .uplot", timeout=30_000)
    page.click("[data-axis=tx] [data-v=log]")
    page.click("[data-axis=ty] [data-v=log]")
    distr = page.evaluate("() => { const c = SLJob.charts().traj; return [c.scales.x.distr, c.scales.y.distr]; }")
    assert distr == [3, 3]  # uPlot's logarithmic distribution on both axes
    assert page.evaluate("() => SLJob.charts().steps.scales.y.distr") == 3  # step sizes on a log axis
    browser.shot("job")
    with page.expect_download() as info:
        page.click("#downloads [data-fmt=csv]")
    caution, *rows = list(csv.reader(io.StringIO(open(info.value.path()).read())))
    assert caution[0].startswith("# caution: ")
    assert rows[0][:6] == ["t", "S [mol/L]", "H2 [mol/L]", "P [mol/L]", "Byp [mol/L]", "T [K]"] and len(rows) == 122
    page.goto(stack.base + "/")
    row = page.wait_for_selector(f"tr[data-id='{job_id}']")
    assert "succeeded" in row.inner_text()
    assert row.query_selector(".bar > i").evaluate("i => i.style.width") == "100%"  # set by SL.paint
    browser.shot("list")
    assert browser.errors == []


def test_problems_are_marked_at_the_offending_line(browser, stack):
    page = browser.page
    page.goto(stack.base + "/submit")
    page.click("#example")
    page.wait_for_selector("#check-state:text-is('valid')", timeout=30_000)
    browser.shot("submit")
    text = DEMO.read_text().replace('"kLa * (H2_sat - H2)"', '"kLa * (H2_sat - H2x)"')
    page.fill("#spec", text)
    item = page.wait_for_selector("#problems li", timeout=30_000)
    line = next(i for i, s in enumerate(text.splitlines(), 1) if "H2x" in s)
    assert item.get_attribute("data-line") == str(line)
    assert "unknown name 'H2x'" in item.inner_text()
    assert page.inner_text(f"#gutter .err") == str(line)
    assert page.is_disabled("#submit")
    browser.shot("submit-error")
    page.fill("#spec", '{"span": [0, 1],\n  "model": ')
    page.wait_for_selector("#check-state:text-is('not valid JSON')")
    assert browser.errors == []


def test_json_pointers_map_to_lines_of_the_pasted_text(browser, stack):
    page = browser.page
    page.goto(stack.base + "/submit")
    text = '{\n  "span": [0,\n    1],\n  "model": {"ddt": {\n    "a/b": "x + y"}}\n}'
    lines = page.evaluate("""t => { const m = SLJson.locate(t); return [
        SLJson.lineForPointer(t, m, '/span/1', ''), SLJson.lineForPointer(t, m, '/model/ddt/a~1b', 'position 4: x'),
        SLJson.lineForPointer(t, m, '/model/states', 'missing'), SLJson.lineForPointer(t, m, '/', 'x')]; }""", text)
    assert lines == [3, 5, 4, 1]


def robertson_spec() -> dict:
    model = json.loads(example_path("models", "robertson.json").read_text())
    return {"label": "Robertson kinetics, automatic switching", "model": model, "span": [0, 1e5],
            "output": {"count": 200, "spacing": "log"}, "tolerance": {"rtol": 1e-6, "atol": 1e-10},
            "method": "auto"}


def test_a_stiff_run_shows_its_switches_phases_and_conservation_drift(browser, stack):
    job_id = stack.submit(robertson_spec())
    assert stack.wait(job_id, timeout=180)["state"] == "succeeded"
    page = browser.page
    page.goto(f"{stack.base}/jobs/{job_id}")
    page.wait_for_selector("#switches table", timeout=30_000)
    first = page.inner_text("#switches tbody tr")
    assert "dormand_prince_54" in first and "stiffness_detected" in first
    assert page.is_visible("#drift .uplot") and page.is_visible("#stiff .uplot")
    assert "phase" in page.inner_text("#method-legend")
    facts = page.inner_text("#run-facts")  # which evaluation tier ran, and why
    assert "model evaluated by" in facts and ("machine code" in facts or "interpreter" in facts)
    page.click("[data-axis=tx] [data-v=log]")
    page.click("[data-axis=sx] [data-v=log]")
    browser.shot("job-stiff")
    assert browser.errors == []


LONG = {"label": "long oscillator (dashboard)", "model": {"states": {"u": 1.0, "v": 0.0}, "ddt": {"u": "v", "v": "-u"}},
        "span": [0.0, 1.0e7], "output": {"count": 3}, "tolerance": {"rtol": 1e-12, "atol": 1e-14},
        "method": "dormand_prince_54", "limits": {"max_steps": 100_000_000, "max_wall_seconds": 120}}


def test_a_running_job_shows_live_progress_and_can_be_cancelled_from_its_page(browser, stack):
    job_id = stack.submit(LONG)
    stack.wait(job_id, states=("running",), timeout=60)
    page = browser.page
    page.goto(f"{stack.base}/jobs/{job_id}")
    page.wait_for_function("() => parseFloat(document.getElementById('progress-bar').style.width) > 0",
                           timeout=60_000)
    assert page.is_visible("#progress-card") and page.is_visible("#cancel")
    browser.shot("job-running")
    page.click("#cancel")
    page.wait_for_selector(".state.cancelled", timeout=60_000)
    assert not page.is_visible("#cancel")
    assert page.is_visible("#progress-card")  # kept at the fraction the run reached
    assert page.inner_text("#progress-text").startswith("cancelled at")
    assert "cancelled" in page.inner_text("#outcome")
    assert browser.errors == []


def test_long_outputs_are_thinned_for_drawing_but_keep_their_extremes(browser, stack):
    page = browser.page
    page.goto(stack.base + "/jobs/0123456789abcdef0123456789ab")  # any page that loads plots.js
    out = page.evaluate("""() => {
        const n = 100000, x = [], y = [];
        for (let i = 0; i < n; i++) { x.push(i + 1); y.push(Math.sin(i / 500)); }
        y[51234] = 42; y[777] = -42;
        const [xs, ys] = SLPlots.prepare(x, [y], true, false);
        return { n: xs.length, max: Math.max(...ys), min: Math.min(...ys), first: xs[0], last: xs[xs.length - 1],
                 sorted: xs.every((v, i) => i === 0 || v > xs[i - 1]) };
    }""")
    assert out["n"] <= 6000 and out["sorted"]
    assert (out["max"], out["min"]) == (42, -42)
    assert (out["first"], out["last"]) == (1, 100000)
