"""Every way a run can end, events, non-negativity, outputs and the report."""
import json
import math

import numpy as np
import pytest

from engine import integrate as I
from engine.integrate import SolverOptions, integrate
from tests.engine import kernels as K

ALL = ["dormand_prince_54", "radau_iia_5", "rosenbrock_4", "auto"]


def solve(spec, t_end, t_out=None, monitor=None, conservation=None, **kw):
    m = K.model(spec)
    o = SolverOptions(event_directions=m.event_directions, event_terminal=m.event_terminal,
                      **kw)
    t_out = np.array([t_end]) if t_out is None else t_out
    return integrate(m.kernel, m.p, m.y0, (0.0, t_end), t_out, o, monitor=monitor,
                     conservation=conservation)


def decay(c, direction="falling", stop=True):
    return {"states": {"y": 1.0}, "parameters": {"k": 2.0, "c": c},
            "ddt": {"y": "-k*y"},
            "events": [{"name": "low", "when": "y - c", "direction": direction,
                        "stop": stop}]}


@pytest.mark.parametrize("method", ALL)
def test_terminal_event_located_against_analytic_time(method):
    # y = exp(-k t) reaches c at t* = ln(1/c) / k.
    rtol = 1e-9
    sol = solve(decay(0.25), 5.0, np.linspace(0, 5, 51), method=method, rtol=rtol,
                atol=1e-13)
    t_star = math.log(4.0) / 2.0
    assert sol.outcome == I.SUCCEEDED and sol.terminal_event == 0
    # Located on the step's interpolant, whose error is one order above the
    # step's: 100 tolerance units.
    assert sol.t_reached == pytest.approx(t_star, rel=100 * rtol)
    assert sol.event_t[0] == pytest.approx(t_star, rel=100 * rtol)
    assert sol.event_y[0, 0] == pytest.approx(0.25, rel=100 * rtol)
    assert sol.t[-1] <= t_star  # no outputs after the stop
    assert "terminal event" in sol.message


def test_event_direction_filter_and_repeated_crossings():
    # x'' = -x, x(0) = 1: x = cos t crosses zero at pi/2 + j pi.
    spec = {"states": {"x": 1.0, "v": 0.0}, "ddt": {"x": "v", "v": "-x"},
            "events": [{"name": "any", "when": "x", "direction": "both"},
                       {"name": "up", "when": "x", "direction": "rising"}]}
    sol = solve(spec, 10.0, method="dormand_prince_54", rtol=1e-10, atol=1e-12)
    assert sol.outcome == I.SUCCEEDED and sol.terminal_event is None
    any_t = sol.event_t[sol.event_index == 0]
    up_t = sol.event_t[sol.event_index == 1]
    np.testing.assert_allclose(any_t, [math.pi / 2, 3 * math.pi / 2, 5 * math.pi / 2],
                               rtol=1e-8)
    np.testing.assert_allclose(up_t, [3 * math.pi / 2], rtol=1e-8)
    assert sol.report["events_found"] == 4
    assert np.all(np.diff(sol.event_t) >= 0)


def test_cancellation_via_monitor():
    calls = []

    def monitor(fraction):
        calls.append(fraction)
        return True

    # An explicit method on a stiff problem over a long span would run for hours.
    sol = solve(K.ROBERTSON, 1e11, method="dormand_prince_54", rtol=1e-6, atol=1e-10,
                max_steps=10**12, monitor=monitor)
    assert sol.outcome == I.CANCELLED
    assert calls and 0.0 <= calls[0] <= 1.0
    assert sol.t_reached > 0 and "cancelled" in sol.message


def test_wall_time_limit():
    sol = solve(K.ROBERTSON, 1e11, method="dormand_prince_54", rtol=1e-6, atol=1e-10,
                max_steps=10**12, max_wall_seconds=0.3)
    assert sol.outcome == I.TIME_LIMIT
    assert "max_wall_seconds" in sol.message


@pytest.mark.parametrize("method", ALL)
def test_non_finite_rhs_reports_time(method):
    spec = {"states": {"y": 0.0}, "ddt": {"y": "sqrt(1 - t)"}}
    sol = solve(spec, 2.0, method=method, rtol=1e-6, atol=1e-10)
    assert sol.outcome == I.NON_FINITE
    assert sol.t_reached == pytest.approx(1.0, abs=1e-6)
    assert "t=1" in sol.message and "non-finite" in sol.message
    assert np.all(np.isfinite(sol.y_reached))


def test_non_finite_at_start():
    spec = {"states": {"y": -1.0}, "ddt": {"y": "log(y)"}}
    sol = solve(spec, 1.0, method="auto")
    assert sol.outcome == I.NON_FINITE and sol.t_reached == 0.0


@pytest.mark.parametrize("method", ALL)
def test_step_limit(method):
    sol = solve(K.HIRES, K.HIRES_END, method=method, max_steps=7)
    assert sol.outcome == I.STEP_LIMIT
    r = sol.report
    assert r["accepted_steps"] + r["rejected_steps"] == 7
    assert "max_steps" in sol.message


def test_tolerance_unreachable():
    sol = solve(K.ROBERTSON, 1.0, rtol=1e-15)
    assert sol.outcome == I.TOLERANCE_UNREACHABLE and "rtol" in sol.message


def test_blow_up_is_step_underflow():
    # y' = y^2, y(0) = 1 has y = 1 / (1 - t): a singularity at t = 1.
    spec = {"states": {"y": 1.0}, "ddt": {"y": "y^2"}}
    sol = solve(spec, 2.0, method="dormand_prince_54")
    assert sol.outcome in (I.STEP_UNDERFLOW, I.NON_FINITE)
    assert sol.t_reached == pytest.approx(1.0, abs=1e-3)
    sol = solve(spec, 2.0, method="radau_iia_5")
    assert sol.outcome in (I.STEP_UNDERFLOW, I.NEWTON_FAILURE, I.NON_FINITE)
    assert sol.t_reached == pytest.approx(1.0, abs=1e-3)


@pytest.mark.parametrize("method", ALL)
def test_nonnegative_states_stay_nonnegative(method):
    # Fast consumption of a species to exhaustion (invented rates): at loose
    # tolerances the unconstrained solution dips below zero.
    spec = {"states": {"a": 1.0, "b": 0.0},
            "ddt": {"a": "-50*a/(a + 1e-3)", "b": "50*a/(a + 1e-3)"}}
    times = np.linspace(0, 1, 201)
    sol = solve(spec, 1.0, times, method=method, rtol=1e-3, atol=1e-8, nonnegative=True)
    assert sol.outcome == I.SUCCEEDED
    assert np.all(sol.y >= 0.0)
    assert sol.y[-1, 1] == pytest.approx(1.0, rel=1e-3)


def test_outputs_aux_conservation_and_counters():
    m = K.model(K.ARENSTORF)
    times = np.linspace(0, 2.0, 21)
    sol = integrate(m.kernel, m.p, m.y0, (0.0, 2.0), times,
                    SolverOptions(method="dormand_prince_54", rtol=1e-8, atol=1e-10))
    mu = 0.012277471
    d1 = ((sol.y[:, 0] + mu) ** 2 + sol.y[:, 1] ** 2) ** 1.5
    np.testing.assert_allclose(sol.aux[:, 0], d1, rtol=1e-12)
    np.testing.assert_array_equal(sol.t, times)
    r = sol.report
    assert r["rhs_evaluations"] == 6 * (r["accepted_steps"] + r["rejected_steps"]) + 2
    rob = solve(K.ROBERTSON, 1e5, np.geomspace(1e-6, 1e5, 30), method="auto",
                rtol=1e-6, atol=1e-10, conservation=np.ones((1, 3)))
    assert rob.report["conservation_drift"] < 1e-10


@pytest.mark.parametrize("method", ALL)
def test_report_is_json_safe_and_named(method):
    sol = solve(K.VAN_DER_POL, 3000.0, np.linspace(0, 3000, 50), method=method,
                max_steps=3000 if method == "dormand_prince_54" else 100_000)
    text = json.dumps(sol.report, allow_nan=False)
    r = json.loads(text)
    for key in ("accepted_steps", "rejected_steps", "rhs_evaluations", "jacobian_evaluations",
                "lu_factorizations", "newton_iterations", "newton_failures",
                "steps_per_method", "seconds_per_method", "switches", "step_history",
                "stiffness_samples", "explicit_steps_needed", "warnings", "solve_seconds"):
        assert key in r
    assert len(r["step_history"]["t"]) <= 500
    if method != "auto":
        assert r["methods_used"] == [method]
    assert sol.outcome in I.OUTCOMES


def test_large_atol_warns():
    sol = solve(K.ROBERTSON, 1.0, np.linspace(0, 1, 5), rtol=1e-6, atol=1e-3)
    assert any("atol" in w for w in sol.report["warnings"])


def test_a_right_hand_side_too_large_for_the_error_norm_ends_non_finite():
    # |f| = 1e300 * y^2 overflows the squared norm of the starting-step estimate
    # (Hairer, Norsett & Wanner I, II.4): the run must end with an outcome, not an exception.
    spec = {"states": {"y": 1.0}, "ddt": {"y": "1e300*y*y"}}
    for method in ("auto", "dormand_prince_54"):
        sol = solve(spec, 1.0, method=method)
        assert sol.outcome == I.NON_FINITE and "non-finite" in sol.message


def test_a_tiny_absolute_tolerance_on_a_zero_state_still_solves():
    # atol far below any physical scale, state exactly zero: weights 1/atol must not divide by 0
    sol = solve({"states": {"y": 1.0, "z": 0.0}, "ddt": {"y": "-y", "z": "0"}}, 1.0, atol=1e-60)
    assert sol.outcome == I.SUCCEEDED
    assert sol.y_reached[0] == pytest.approx(math.exp(-1.0), rel=1e-5)


def test_a_stiff_model_pinned_to_the_explicit_method_is_told_to_use_auto():
    # Robertson is the textbook stiff system (Hairer & Wanner II, sec. IV.1)
    sol = solve(K.ROBERTSON, 1e5, method="dormand_prince_54", max_steps=20_000)
    assert sol.outcome == I.STEP_LIMIT
    assert "the model is stiff (stiffness ratio ~" in sol.message
    assert "you pinned (dormand_prince_54)" in sol.message and "use method 'auto'" in sol.message


def test_the_wall_time_message_names_the_method_and_whether_the_run_was_stiff():
    sol = solve(K.LORENZ, 1e7, method="auto", max_steps=10**12, max_wall_seconds=0.3)
    assert sol.outcome == I.TIME_LIMIT
    assert "the run was on dormand_prince_54" in sol.message and "did not look stiff" in sol.message


@pytest.mark.parametrize("method", ["auto", "radau_iia_5"])
def test_a_blow_up_names_the_state_that_grew_without_bound(method):
    # x' = x^2, x(0) = 1 has the solution 1/(1 - t): it blows up at t = 1 (closed form)
    spec = {"states": {"x": 1.0, "z": 2.0}, "ddt": {"x": "x*x", "z": "-z"}}
    m = K.model(spec)
    o = SolverOptions(method=method, state_names=m.state_names)
    sol = integrate(m.kernel, m.p, m.y0, (0.0, 2.0), np.array([2.0]), o)
    assert sol.outcome in (I.STEP_UNDERFLOW, I.NON_FINITE)
    assert sol.t_reached == pytest.approx(1.0, abs=1e-3)
    assert "x (|value|" in sol.message and "grows without bound" in sol.message and "z (" not in sol.message
