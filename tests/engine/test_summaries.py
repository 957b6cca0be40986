"""Per-member summaries against a problem with a known solution: c(t) = c0 exp(-k t)."""
import numpy as np
import pytest

from sweeps import summaries
from engine.integrate import SolverOptions, integrate
from engine.model import prepare

C0, K, T = 2.0, 0.7, 10.0
DECAY = {"title": "first-order decay", "states": {"c": C0}, "parameters": {"k": K},
         "derived": {"bump": "c*(C0 - c)"}, "ddt": {"c": "-k*c"}}
DECAY["parameters"]["C0"] = C0
SPECS = [
    {"kind": "final", "of": "c"},
    {"kind": "at", "of": "c", "time": 3.0},
    {"kind": "max", "of": "c"},
    {"kind": "min", "of": "c"},
    {"kind": "crossing", "of": "c", "level": 0.5, "when": "below"},
    {"kind": "integral", "of": "c"},
    {"kind": "max", "of": "bump"},
]
COLUMNS = ["final_c", "at_c_3", "max_c", "max_c_time", "min_c", "min_c_time", "below_c_0.5",
           "integral_c", "max_bump", "max_bump_time"]


def exact_values():
    # analytic: the crossing of level c is at ln(c0/c)/k; the integral is c0/k (1 - exp(-k T));
    # bump = c (c0 - c) peaks at c = c0/2, i.e. t = ln 2 / k, with value c0^2/4.
    return np.array([C0 * np.exp(-K * T), C0 * np.exp(-K * 3.0), C0, 0.0, C0 * np.exp(-K * T), T,
                     np.log(C0 / 0.5) / K, C0 / K * (1 - np.exp(-K * T)),
                     C0 ** 2 / 4, np.log(2) / K])


def test_column_names():
    assert summaries.columns(SPECS) == COLUMNS
    assert summaries.columns([{"kind": "max", "of": "c", "name": "peak"}]) == ["peak", "peak_time"]


def test_grid_contains_requested_times_and_both_ends():
    g = summaries.grid([0.0, 10.0], 11, "linear", extra_times=[3.3, 20.0])
    assert g[0] == 0.0 and g[-1] == 10.0 and 3.3 in g and 20.0 not in g and len(g) == 12
    g = summaries.grid([1.0, 1e4], 50, "log")
    assert g[0] == 1.0 and g[-1] == 1e4 and np.all(np.diff(g) > 0)


def test_summaries_of_the_exact_solution_on_a_fine_grid():
    t = summaries.grid([0.0, T], 1001, "linear", [3.0])
    c = C0 * np.exp(-K * t)
    terms = summaries.plan(SPECS, ("c",), ("bump",), ())
    got = summaries.evaluate(terms, t, c[:, None], (c * (C0 - c))[:, None], np.zeros(0), np.zeros(0, int))
    want = exact_values()
    assert got[[0, 1, 2, 3, 4, 5]] == pytest.approx(want[[0, 1, 2, 3, 4, 5]], rel=1e-12, abs=1e-15)
    # documented error bounds: crossing h^2|x''|/(8|x'|) = h^2 k / 8; trapezoid T h^2 max|x''|/12
    h = T / 1000
    assert abs(got[6] - want[6]) <= h ** 2 * K / 8 * 1.01
    assert abs(got[7] - want[7]) <= T * h ** 2 * C0 * K ** 2 / 12
    # parabolic refinement of an interior maximum: value to O(h^3), time to O(h^2)
    assert got[8] == pytest.approx(want[8], rel=h ** 3)
    assert got[9] == pytest.approx(want[9], abs=h ** 2)


def test_summaries_through_the_integrator_match_the_analytic_values():
    model = prepare(DECAY)
    t = summaries.grid([0.0, T], 1001, "linear", [3.0])
    sol = integrate(model.kernel, model.p, model.y0, (0.0, T), t,
                    SolverOptions(method="rosenbrock_4", rtol=1e-10, atol=1e-14, diagnostics="counts"))
    assert sol.outcome == "succeeded"
    terms = summaries.plan(SPECS, model.state_names, model.aux_names, model.event_names)
    got = summaries.evaluate(terms, sol.t, sol.y, sol.aux, sol.event_t, sol.event_index)
    want = exact_values()
    assert got[:9] == pytest.approx(want[:9], rel=1e-5, abs=1e-9)
    assert got[9] == pytest.approx(want[9], abs=(T / 1000) ** 2)


def test_event_summary_is_the_first_located_event():
    terms = [summaries.Term("event", 0, 1, np.nan, np.nan, True)]
    got = summaries.evaluate(terms, np.array([0.0, 1.0]), np.zeros((2, 1)), np.zeros((2, 0)),
                             np.array([0.2, 0.4, 0.9]), np.array([0, 1, 1]))
    assert got.tolist() == [0.4]
    assert np.isnan(summaries.evaluate(terms, np.array([0.0]), np.zeros((1, 1)), np.zeros((1, 0)),
                                       np.zeros(0), np.zeros(0, int)))[0]


def test_no_crossing_is_nan_and_a_condition_holding_at_the_start_gives_t0():
    t = np.linspace(0, 1, 11)
    x = np.linspace(1, 2, 11)
    assert np.isnan(summaries.first_crossing(t, x, 5.0, True))
    assert summaries.first_crossing(t, x, 0.5, True) == 0.0
    assert summaries.first_crossing(t, x, 1.55, True) == pytest.approx(0.55)


def test_extrema_skip_nan_samples_and_all_nan_gives_nan():
    t = np.arange(4.0)
    assert summaries.extremum(t, np.array([np.nan, 1.0, 3.0, np.nan]), True) == (3.0, 2.0)
    assert summaries.extremum(t, np.array([np.nan, 1.0, -3.0, np.nan]), False) == (-3.0, 2.0)
    assert np.isnan(summaries.extremum(t, np.full(4, np.nan), True)).all()
