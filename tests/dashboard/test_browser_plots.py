"""The job page's plots in a real browser on the live stack: log axes with zeros and values
spanning dozens of decades, stiff runs opening on log time, one panel per unit, events, hover
values, legends, switch labels, and the sentence under the step sizes."""
import json
import math
import re

import pytest

from tests.conftest import example_path

pytestmark = pytest.mark.e2e
DEMO = json.loads(example_path("jobs", "tarnwhistle_demo.json").read_text())


def robertson_spec() -> dict:
    model = json.loads(example_path("models", "robertson.json").read_text())
    return {"label": "Robertson kinetics (plots)", "model": model, "span": [0, 1e5],
            "output": {"count": 200, "spacing": "log"}, "tolerance": {"rtol": 1e-6, "atol": 1e-10}}


# x decays to about 4e-44 (44 decades below its start: more than the chart library's log ticks
# can take) and z stays exactly 0 (nothing of it can be drawn on a log axis).
DECAY = {"label": "decay to 4e-44 beside a zero state",
         "model": {"states": {"x": 1.0, "z": 0.0}, "ddt": {"x": "-x", "z": "0"}},
         "span": [0.0, 100.0], "output": {"count": 101}, "tolerance": {"rtol": 1e-6, "atol": 1e-50}}

# y = exp(-t) crosses 0.5 at ln 2 and 0.1 at ln 10: two events that do not stop the run.
EVENTS = {"label": "decay with two events",
          "model": {"states": {"y": {"initial": 1.0, "unit": "mmol/L"}}, "ddt": {"y": "-y"},
                    "events": [{"name": "half", "when": "y - 0.5", "direction": "falling"},
                               {"name": "tenth", "when": "y - 0.1", "direction": "falling"}]},
          "span": [0.0, 5.0], "output": {"count": 51}, "tolerance": {"rtol": 1e-9, "atol": 1e-12}}

SIMPLE = {"label": "simple decay", "model": {"states": {"x": 1.0}, "ddt": {"x": "-x"}}, "span": [0.0, 10.0]}


def open_job(browser, stack, spec) -> str:
    job_id = stack.submit(spec)
    assert stack.wait(job_id, timeout=180)["state"] == "succeeded"
    browser.page.goto(f"{stack.base}/jobs/{job_id}")
    browser.page.wait_for_selector("#traj .uplot", timeout=30_000)
    return job_id


def test_log_values_hide_what_they_cannot_draw_and_say_so(browser, stack):
    open_job(browser, stack, DECAY)
    page = browser.page
    page.click("[data-axis=ty] [data-v=log]")
    page.wait_for_selector("#traj .uplot canvas")
    page.wait_for_timeout(300)  # uPlot draws on the next frame: an error would be thrown there
    assert browser.errors == []  # was: RangeError "Invalid array length" inside uPlot, a bare legend instead of a plot
    legend = page.inner_text("#traj .u-legend")
    assert "z (101 values <= 0 hidden)" in legend
    ticks = page.evaluate("() => SLJob.charts().traj.axes[1]._values")
    assert ticks and ticks[-1] == "1" and any(t.startswith("1e-4") for t in ticks)  # the whole 44 decades
    drawn = page.evaluate("() => SLJob.charts().traj.data[1].filter(v => v != null).length")
    assert drawn == 101  # every x is drawn, down to 4e-44
    page.click("[data-axis=tx] [data-v=log]")
    page.click("[data-axis=sx] [data-v=log]")
    assert page.evaluate("() => SLJob.charts().steps.data[0].length") > 10  # the step sizes are drawn
    browser.shot("job-log-decades")
    assert browser.errors == []


def test_stiff_runs_open_on_log_time(browser, stack):
    open_job(browser, stack, robertson_spec())  # log-spaced output
    page = browser.page
    page.wait_for_selector("#steps .uplot")
    assert page.evaluate("() => [SLJob.charts().traj.scales.x.distr, SLJob.charts().steps.scales.x.distr]") == [3, 3]
    assert page.evaluate("() => SLJob.view().tx") == "log"
    assert "on" in page.get_attribute("[data-axis=tx] [data-v=log]", "class")
    open_job(browser, stack, DEMO)  # linear output, but an implicit phase
    page.wait_for_selector("#steps .uplot")
    assert page.evaluate("() => SLJob.charts().traj.scales.x.distr") == 3
    open_job(browser, stack, SIMPLE)  # not stiff: linear time
    assert page.evaluate("() => SLJob.charts().traj.scales.x.distr") == 1
    assert browser.errors == []


def test_states_in_different_units_get_panels_of_their_own(browser, stack):
    open_job(browser, stack, DEMO)
    page = browser.page
    assert len(page.query_selector_all("#traj .uplot")) == 2  # mol/L and K
    panels = page.evaluate("() => SLJob.charts().trajPanels.map(c => [c.axes[1].label, c.series.slice(1).map(s => s.label)])")
    assert panels == [["mol/L", ["S [mol/L]", "H2 [mol/L]", "P [mol/L]", "Byp [mol/L]"]], ["K", ["T [K]"]]]
    # the concentrations keep their own scale: not flattened by T ~ 330
    top = page.evaluate("() => SLJob.charts().trajPanels[0].scales.y.max")
    assert top < 10
    assert "S [mol/L]" in page.inner_text("#pick")
    browser.shot("job-units")
    assert browser.errors == []


def test_events_are_marked_on_the_plots_and_listed(browser, stack):
    open_job(browser, stack, EVENTS)
    page = browser.page
    page.wait_for_selector("#events table")
    rows = page.eval_on_selector_all("#events tbody tr", "rs => rs.map(r => Array.from(r.children).map(c => c.textContent))")
    assert [r[0] for r in rows] == ["half", "tenth"]
    assert math.isclose(float(rows[0][1]), math.log(2), rel_tol=1e-5)
    assert math.isclose(float(rows[1][1]), math.log(10), rel_tol=1e-5)
    assert float(rows[0][2]) == pytest.approx(0.5, rel=1e-4) and float(rows[1][2]) == pytest.approx(0.1, rel=1e-4)
    assert "y [mmol/L]" in page.text_content("#events thead")
    assert page.eval_on_selector("#events thead .unit", "u => getComputedStyle(u).textTransform") == "none"
    marks = page.evaluate("() => [SLJob.charts().traj._eventMarks.map(m => m.name), SLJob.charts().steps._eventMarks.length]")
    assert marks == [["half", "tenth"], 2]
    browser.shot("job-events")
    assert browser.errors == []


def test_hover_values_have_four_digits_and_the_legend_no_empty_rows(browser, stack):
    open_job(browser, stack, robertson_spec())
    page = browser.page
    # before any hover: the series are listed, no value cells and no bare "t:" row
    visible = page.evaluate("""() => Array.from(document.querySelectorAll('#traj .u-legend .u-series'))
        .filter(r => r.offsetParent !== null).map(r => r.innerText.trim())""")
    assert visible == ["y1", "y2", "y3"]
    box = page.query_selector("#traj .u-over").bounding_box()
    page.mouse.move(box["x"] + box["width"] * 0.6, box["y"] + box["height"] / 2)
    page.wait_for_function("() => !document.querySelector('#traj .uplot').classList.contains('idle')")
    values = page.eval_on_selector_all("#traj .u-legend .u-value", "vs => vs.map(v => v.textContent)")
    assert len(values) == 4
    for v in values[1:]:
        digits = re.sub(r"e.*$", "", v).replace("-", "").replace(".", "").lstrip("0")
        assert len(digits) >= 4, values
    # the switch label sits inside the plot, clear of the axis and its top tick
    boxes = page.evaluate("() => SLJob.charts().steps._markerBoxes")
    assert boxes
    for b in boxes:
        assert b["left"] >= b["plot"]["left"] and b["right"] <= b["plot"]["right"] and b["top"] >= b["plot"]["top"]
    assert browser.errors == []


def test_histogram_ticks_never_repeat_a_label(browser, stack):
    page = browser.page
    page.goto(stack.base + "/batches/0123456789abcdef0123456789ab")  # any page that loads plots.js
    ticks = page.evaluate("""async () => {
        const draw = async x => {
            const el = document.createElement('div'); el.style.width = '600px'; document.body.appendChild(el);
            const c = SLPlots.barChart(el, { x, y: x.map((_, k) => k % 5) });
            await new Promise(r => setTimeout(r, 50));
            return c.axes[0]._values;
        };
        const near330 = [], small = [];
        for (let k = 0; k < 12; k++) { near330.push(330.00012 + k * 0.00001); small.push(1.2e-5 + k * 0.2e-6); }
        return [await draw(near330), await draw(small)];
    }""")
    for labels in ticks:
        assert len(labels) >= 2 and len(set(labels)) == len(labels), labels
    assert all(re.fullmatch(r"1\.\d+e-5", t) for t in ticks[1]), ticks[1]


def test_the_steps_sentence_is_phrased_by_case(browser, stack):
    open_job(browser, stack, SIMPLE)
    page = browser.page
    page.wait_for_selector("#steps .uplot")
    note = page.inner_text("#steps-note")
    assert note.startswith("Not stiff: dormand_prince_54 did all the work") and "would have needed" not in note
    open_job(browser, stack, robertson_spec())
    page.wait_for_selector("#steps .uplot")
    note = page.inner_text("#steps-note")
    assert note.startswith("Stiff run: an explicit method alone would have needed about") and "times fewer" in note
    assert browser.errors == []
