"""The residual Jacobian against closed forms, derived observables, initial values as
unknowns, several experiments, failed solves, poorly determined problems, the JSON shape."""
from __future__ import annotations

import json
import math

import numpy as np
import pytest

from calibration.fit import (CAUTION, StartOutcome, _evaluator, fit, run_start, starts, summarise)
from calibration.problem import Experiment, Noise, Problem, Unknown

# A -> B -> C, first order (k1, k2); closed form (any kinetics text, e.g. Atkins' Physical
# Chemistry, consecutive reactions):
#   A = A0 e1, B = A0 k1/(k2 - k1) (e1 - e2), e1 = exp(-k1 t), e2 = exp(-k2 t)
CHAIN = {"states": {"A": 2.0, "B": 0.0, "C": 0.0}, "parameters": {"k1": 0.7, "k2": 0.3},
         "reactions": [{"equation": "A -> B", "k": "k1"}, {"equation": "B -> C", "k": "k2"}],
         "derived": {"rate_b": "k2 * B", "share_b": "B / (A + B + C)"}}
K1, K2, A0 = 0.7, 0.3, 2.0
T = np.array([0.25, 0.5, 1.0, 2.0, 4.0, 8.0])


def closed_form(t, k1=K1, k2=K2, a0=A0):
    e1, e2 = np.exp(-k1 * t), np.exp(-k2 * t)
    d = e1 - e2
    B = a0 * k1 / (k2 - k1) * d
    dB_dk1 = a0 * (k2 * d / (k2 - k1) ** 2 - k1 * t * e1 / (k2 - k1))
    dB_dk2 = a0 * k1 * (-d / (k2 - k1) ** 2 + t * e2 / (k2 - k1))
    return {"A": a0 * e1, "B": B, "C": a0 - a0 * e1 - B, "dB_dk1": dB_dk1, "dB_dk2": dB_dk2,
            "dB_dA0": B / a0, "dA_dk1": -t * a0 * e1}


def chain_problem(observed: dict, unknowns, **kw) -> Problem:
    e = Experiment("chain", (0.0, 8.0), T, observed)
    return Problem(CHAIN, (e,), {k: k for k in observed}, {}, tuple(unknowns), rtol=1e-10, atol=1e-14, **kw)


def test_residual_jacobian_matches_the_closed_form_of_a_first_order_chain():
    ref = closed_form(T)
    problem = chain_problem({"A": ref["A"] + 0.1, "B": ref["B"] - 0.1},
                            [Unknown("k1", 0.01, 10), Unknown("k2", 0.01, 10), Unknown("init:A", 0.1, 10)])
    r, J, ok, _ = _evaluator(problem).residuals(np.array([K1, K2, A0]))
    assert ok
    np.testing.assert_allclose(r, np.concatenate([np.full(6, 0.1), np.full(6, -0.1)]), atol=1e-8)
    # residual = observed - model, so its derivative is minus the model's (sigma = 1)
    np.testing.assert_allclose(-J[:6, 0], ref["dA_dk1"], rtol=1e-6, atol=1e-10)
    np.testing.assert_allclose(-J[:6, 1], 0.0, atol=1e-10)
    np.testing.assert_allclose(-J[:6, 2], ref["A"] / A0, rtol=1e-7)
    np.testing.assert_allclose(-J[6:, 0], ref["dB_dk1"], rtol=1e-6, atol=1e-10)
    np.testing.assert_allclose(-J[6:, 1], ref["dB_dk2"], rtol=1e-6, atol=1e-10)
    np.testing.assert_allclose(-J[6:, 2], ref["dB_dA0"], rtol=1e-7)


def test_derived_observables_get_exact_derivatives_through_states_and_parameters():
    # rate_b = k2 B: d/dk1 = k2 dB/dk1, d/dk2 = B + k2 dB/dk2 (its own parameter term);
    # share_b = B / (A + B + C) = B / A0 (mass is conserved): d/dA0 = 0
    ref = closed_form(T)
    problem = chain_problem({"rate_b": K2 * ref["B"], "share_b": ref["B"] / A0},
                            [Unknown("k1", 0.01, 10), Unknown("k2", 0.01, 10), Unknown("init:A", 0.1, 10)])
    r, J, ok, _ = _evaluator(problem).residuals(np.array([K1, K2, A0]))
    assert ok
    np.testing.assert_allclose(r, 0.0, atol=1e-9)
    np.testing.assert_allclose(-J[:6, 0], K2 * ref["dB_dk1"], rtol=1e-6, atol=1e-10)
    np.testing.assert_allclose(-J[:6, 1], ref["B"] + K2 * ref["dB_dk2"], rtol=1e-6, atol=1e-10)
    np.testing.assert_allclose(-J[6:, 0], ref["dB_dk1"] / A0, rtol=1e-6, atol=1e-10)
    np.testing.assert_allclose(-J[6:, 2], 0.0, atol=1e-9)


def test_rate_constants_and_an_initial_value_are_recovered_from_noise_free_data():
    ref = closed_form(T, 1.3, 0.2, 1.5)
    problem = chain_problem({"B": ref["B"], "share_b": ref["B"] / 1.5, "C": ref["C"]},
                            [Unknown("k1", 0.01, 10), Unknown("k2", 0.01, 10),
                             Unknown("init:A", 0.1, 10, scale="linear")],
                            )
    est = fit(problem, 4, seed=3)
    np.testing.assert_allclose(est.x, [1.3, 0.2, 1.5], rtol=1e-6)
    assert est.sum_of_squares < 1e-12


def test_several_experiments_share_the_unknowns_and_keep_their_own_conditions():
    # the same k1, k2 under two initial loads, one experiment with its own k2
    ref1 = closed_form(T)
    ref2 = closed_form(T, K1, 0.9, 5.0)
    e1 = Experiment("low", (0.0, 8.0), T, {"B": ref1["B"]})
    e2 = Experiment("high", (0.0, 8.0), T, {"B": ref2["B"]}, initial={"A": 5.0}, parameters={"k2": 0.9})
    problem = Problem(CHAIN, (e1, e2), {"B": "B"}, {}, (Unknown("k1", 0.01, 10),), parameters={"k2": K2},
                      rtol=1e-10, atol=1e-14)
    est = fit(problem, 3)
    assert est.x[0] == pytest.approx(K1, rel=1e-7)
    out = est.to_json()
    assert [e["name"] for e in out["experiments"]] == ["low", "high"]
    np.testing.assert_allclose(out["experiments"][1]["fitted"]["B"], ref2["B"], rtol=1e-7, atol=1e-12)


def test_weights_come_from_the_noise_model_and_per_point_sigmas():
    ref = closed_form(T)
    observed = ref["B"] * (1 + 0.02 * np.array([1, -1, 1, -1, 1, -1]))
    sigma = np.full(6, np.nan)
    sigma[2] = 0.5
    e = Experiment("chain", (0.0, 8.0), T, {"B": observed}, sigma={"B": sigma})
    problem = Problem(CHAIN, (e,), {"B": "B"}, {"B": Noise(absolute=0.01, relative=0.05)},
                      (Unknown("k1", 0.01, 10),), parameters={"k2": K2}, rtol=1e-10, atol=1e-14)
    r, _, ok, _ = _evaluator(problem).residuals(np.array([K1]))
    expected_sigma = np.sqrt(0.01 ** 2 + (0.05 * np.abs(observed)) ** 2)
    expected_sigma[2] = 0.5
    np.testing.assert_allclose(r, (observed - ref["B"]) / expected_sigma, rtol=1e-6, atol=1e-9)
    est = summarise(problem, [run_start(problem, 0, [0.5])])
    # AIC/BIC are -2 ln L of Gaussian errors with these sigmas plus 2m or m ln N
    neg2 = est.chi_square + np.sum(np.log(2 * np.pi * expected_sigma ** 2))
    assert est.aic == pytest.approx(neg2 + 2, rel=1e-9)
    assert est.bic == pytest.approx(neg2 + math.log(6), rel=1e-9)
    assert est.chi_square == est.sum_of_squares and 0 < est.chi_square_p <= 1


def test_missing_cells_are_skipped():
    ref = closed_form(T)
    b = ref["B"].copy()
    b[[1, 4]] = np.nan
    problem = chain_problem({"B": b}, [Unknown("k1", 0.01, 10), Unknown("k2", 0.01, 10)])
    est = fit(problem, 2)
    assert est.points == 4 and est.dof == 2
    out = est.to_json()["experiments"][0]
    assert out["observed"]["B"][1] is None and out["residuals"]["B"][4] is None
    assert out["fitted"]["B"][1] == pytest.approx(ref["B"][1], rel=1e-6)


def test_a_start_whose_model_blows_up_fails_without_raising_and_others_go_around_it():
    # y' = k y^2, y(0) = 1 blows up at t = 1/k: for k > 0.1 the span [0, 10] cannot be solved
    model = {"states": {"y": 1.0}, "parameters": {"k": 0.05}, "ddt": {"y": "k * y^2"}}
    t = np.linspace(1, 10, 10)
    e = Experiment("e", (0.0, 10.0), t, {"y": 1 / (1 - 0.05 * t)})
    problem = Problem(model, (e,), {"y": "y"}, {"y": Noise(relative=0.01)}, (Unknown("k", 1e-3, 1.0),))
    bad = run_start(problem, 0, [1.0])
    assert bad.status == "failed" and "at the start" in bad.message and bad.failed_solves == 1
    assert bad.to_json()["sum_of_squares"] is None
    good = run_start(problem, 1, [1e-3])  # its first trial step overshoots past k = 0.1
    assert good.status == "converged" and good.failed_solves >= 1 and "could not be solved" in good.message
    est = summarise(problem, [bad, good])
    assert est.x[0] == pytest.approx(0.05, rel=1e-6)
    assert est.starts[-1].index == 0  # failed starts sort last
    assert any("1 of 2 starts failed" in w for w in est.warnings)
    json.dumps(est.to_json(), allow_nan=False)


def test_every_start_failing_gives_an_estimate_of_nulls_with_a_warning():
    model = {"states": {"y": 1.0}, "parameters": {"k": 0.05}, "ddt": {"y": "k * y^2"}}
    e = Experiment("e", (0.0, 10.0), np.array([5.0, 10.0]), {"y": np.array([1.5, 2.0])})
    problem = Problem(model, (e,), {"y": "y"}, {}, (Unknown("k", 0.2, 1.0),))
    est = fit(problem, 2)
    out = est.to_json()
    assert out["unknowns"][0]["estimate"] is None and "every start failed" in out["warnings"][0]
    json.dumps(out, allow_nan=False)


def test_unknowns_the_data_cannot_separate_get_warnings_not_errors():
    # A -> B by two parallel first-order paths: only ka + kb is seen
    model = {"states": {"A": 1.0, "B": 0.0}, "parameters": {"ka": 0.3, "kb": 0.2, "kc": 1.0},
             "reactions": [{"equation": "A -> B", "k": "ka"}, {"equation": "A -> B", "k": "kb"}]}
    t = np.linspace(0.5, 5, 8)
    e = Experiment("e", (0.0, 5.0), t, {"A": np.exp(-0.5 * t)})
    problem = Problem(model, (e,), {"A": "A"}, {}, (Unknown("ka", 0.01, 1), Unknown("kb", 0.01, 1),
                                                    Unknown("kc", 0.1, 10)))
    est = fit(problem, 3)
    out = est.to_json()
    text = " ".join(out["warnings"])
    assert "kc has no effect on any measured value" in text
    assert out["unknowns"][2]["standard_error"] is None
    assert est.x[0] + est.x[1] == pytest.approx(0.5, rel=1e-6)
    json.dumps(out, allow_nan=False)
    # without the inert kc the pair is collinear: not determined or strongly correlated
    problem2 = Problem(model, (e,), {"A": "A"}, {}, problem.unknowns[:2])
    text2 = " ".join(fit(problem2, 3).warnings)
    assert "not determined" in text2 or "nearly singular" in text2 or "strongly correlated" in text2


def test_an_estimate_at_a_bound_is_flagged():
    ref = closed_form(T)
    problem = chain_problem({"B": ref["B"]}, [Unknown("k1", 0.01, 0.5), Unknown("k2", 0.01, 10)])
    est = fit(problem, 3)
    assert est.at_bound == [True, False]
    assert any("k1" in w and "upper bound" in w for w in est.warnings)


def test_starts_put_the_given_values_first_and_spread_the_rest_over_the_scaled_bounds():
    problem = chain_problem({"B": closed_form(T)["B"]},
                            [Unknown("k1", 1e-3, 1e3, start=0.5), Unknown("k2", -1.0, 1.0, scale="linear")])
    x = starts(problem, 11, seed=0)
    assert x.shape == (11, 2)
    assert x[0].tolist() == [0.5, 0.0]  # k2 has no start: its midpoint
    assert ((x[:, 0] >= 1e-3) & (x[:, 0] <= 1e3)).all() and ((x[:, 1] >= -1) & (x[:, 1] <= 1)).all()
    # a Latin hypercube: one point in each of the 10 strata of each scaled axis
    assert sorted(np.floor((np.log10(x[1:, 0]) + 3) / 0.6).astype(int).tolist()) == list(range(10))
    assert sorted(np.floor((x[1:, 1] + 1) / 0.2).astype(int).tolist()) == list(range(10))
    np.testing.assert_array_equal(x, starts(problem, 11, seed=0))


def test_estimate_json_has_the_agreed_shape_and_round_trips_starts():
    ref = closed_form(T)
    problem = chain_problem({"A": ref["A"], "B": ref["B"] * 1.01},
                            [Unknown("k1", 0.01, 10), Unknown("k2", 0.01, 10)])
    est = fit(problem, 3)
    out = json.loads(json.dumps(est.to_json(), allow_nan=False))
    assert {"unknowns", "correlation", "sum_of_squares", "chi_square", "dof", "aic", "bic", "points",
            "warnings", "starts", "experiments", "caution"} <= set(out)
    assert set(out["unknowns"][0]) >= {"name", "estimate", "standard_error", "ci95", "at_bound"}
    assert out["caution"] == CAUTION and "qualified person" in CAUTION
    ssr = [s["sum_of_squares"] for s in out["starts"]]
    assert ssr == sorted(ssr)
    again = StartOutcome.from_json(out["starts"][0])
    assert again.to_json() == out["starts"][0]
    e = out["experiments"][0]
    assert set(e) >= {"name", "times", "observed", "fitted", "residuals", "fine"}
    assert len(e["fine"]["times"]) == 200 and len(e["fine"]["fitted"]["B"]) == 200
    assert e["fine"]["times"][0] == 0.0 and e["fine"]["times"][-1] == 8.0
    # the data span 1.5 decades: the fine grid is even; data over 3 decades get a log grid
    assert np.allclose(np.diff(e["fine"]["times"]), 8.0 / 199)


def test_fine_grid_is_log_spaced_when_the_data_are():
    from calibration.fit import _fine_grid
    grid = _fine_grid(np.array([0.01, 0.1, 1.0, 10.0]), (0.0, 10.0))
    assert len(grid) == 200 and grid[0] == 0.0 and grid[-1] == pytest.approx(10.0)
    ratios = grid[2:] / grid[1:-1]
    assert np.allclose(ratios, ratios[0])


def test_stiff_robertson_rate_constants_over_nine_decades_are_recovered():
    # Robertson's kinetics (Hairer & Wanner II, sec. IV.1), measured at log-spaced times from
    # a tight-tolerance solution of the engine itself (a self-consistency check): the three
    # rate constants (0.04, 3e7, 1e4) come back from starts spread over four decades each
    from pathlib import Path

    from engine.integrate import SolverOptions, integrate
    from engine.model import prepare
    model = json.loads((Path(__file__).resolve().parents[2] / "examples" / "models" / "robertson.json").read_text())
    pm = prepare(model)
    t = np.geomspace(1e-3, 1e5, 12)
    sol = integrate(pm.kernel, pm.p, pm.y0, (0.0, 1e5), t, SolverOptions(rtol=1e-10, atol=1e-16))
    noise = Noise(absolute=1e-6, relative=1e-3)
    e = Experiment("robertson", (0.0, 1e5), t, {"y1": sol.y[:, 0], "y3": sol.y[:, 2]})
    problem = Problem(model, (e,), {"y1": "y1", "y3": "y3"}, {"y1": noise, "y3": noise},
                      (Unknown("k1", 1e-3, 1.0), Unknown("k2", 1e5, 1e9), Unknown("k3", 1e2, 1e6)),
                      rtol=1e-8, atol=1e-14)
    est = fit(problem, 6)
    np.testing.assert_allclose(est.x, [0.04, 3e7, 1e4], rtol=1e-5)
    assert est.reached_best == 6
    grid = est.to_json()["experiments"][0]["fine"]["times"]
    assert grid[0] == 0.0 and grid[2] / grid[1] == pytest.approx(grid[3] / grid[2])  # log-spaced


def test_replicate_measurements_at_one_time_and_a_reading_at_the_start_are_fitted():
    t = np.array([0.0, 1.0, 1.0, 2.0, 2.0, 4.0])
    a = 2 * np.exp(-0.7 * t) * (1 + 0.01 * np.array([0, 1, -1, 1, -1, 0]))
    e = Experiment("replicates", (0.0, 4.0), t, {"A": a})
    est = fit(Problem(CHAIN, (e,), {"A": "A"}, {}, (Unknown("k1", 0.01, 10),), rtol=1e-10, atol=1e-14), 2)
    assert est.x[0] == pytest.approx(0.7, rel=1e-4) and est.points == 6
    fitted = est.to_json()["experiments"][0]["fitted"]["A"]
    assert fitted[1] == fitted[2] and fitted[0] == pytest.approx(2.0)
