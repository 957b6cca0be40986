"""Estimation checked against outside sources (see tests/calibration/references.py for each
source and which values were typed in from memory)."""
from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy.linalg import expm
from scipy.optimize import curve_fit, least_squares

from calibration.fit import run_start, starts, summarise
from calibration.problem import Experiment, Problem, Unknown, check
from tests.calibration import references as R


def digits(value: float, reference: float) -> float:
    """Significant digits of ``value`` that agree with ``reference``."""
    if value == reference:
        return 16.0
    return -math.log10(abs(value - reference) / abs(reference))


def nist_problem(data: dict, bounds) -> Problem:
    x = np.array(data["x"])
    e = Experiment("nist", (0.0, float(x[-1])), x, {"y": np.array(data["y"])})
    unknowns = tuple(Unknown(name, lo, hi, start) for name, (lo, hi), start
                     in zip(("b1", "b2"), bounds, data["starts"][0]))
    return Problem(R.EXPONENTIAL_RISE, (e,), {"y": "y"}, {}, unknowns, rtol=1e-10, atol=1e-14)


NIST = {"boxbod": (R.BOXBOD, [(1.0, 1e4), (1e-3, 10.0)]),
        "misra1a": (R.MISRA1A, [(1.0, 1e4), (1e-6, 1e-1)])}


@pytest.mark.parametrize("name", sorted(NIST))
def test_nist_certified_values_from_both_nist_starts(name):
    # NIST StRD nonlinear regression, BoxBOD and Misra1a: certified estimates and certified
    # standard deviations, each to at least 6 significant digits, from NIST's start 1 and 2
    data, bounds = NIST[name]
    problem = nist_problem(data, bounds)
    assert check(problem) == []
    outcomes = [run_start(problem, i, x0) for i, x0 in enumerate(data["starts"])]
    assert all(o.status == "converged" for o in outcomes), [o.message for o in outcomes]
    est = summarise(problem, outcomes)
    assert est.reached_best == 2
    for j, p in enumerate(("b1", "b2")):
        assert digits(est.x[j], data["certified"][p]) >= 6, (p, est.x[j])
        assert digits(est.standard_error[j], data["certified_sd"][p]) >= 6, (p, est.standard_error[j])
    assert digits(est.sum_of_squares, data["residual_sum_of_squares"]) >= 6
    assert est.dof == data["dof"] and est.points == len(data["x"])


@pytest.mark.parametrize("name", sorted(NIST))
def test_nist_intervals_and_correlation_agree_with_curve_fit_on_the_closed_form(name):
    # independent cross-check: scipy.optimize.curve_fit on y = b1 (1 - exp(-b2 x)) at tight
    # tolerance; its covariance is s^2 (J^T J)^-1 as ours (absolute_sigma=False)
    data, bounds = NIST[name]
    x, y = np.array(data["x"]), np.array(data["y"])
    popt, pcov = curve_fit(lambda x, b1, b2: b1 * (1 - np.exp(-b2 * x)), x, y,
                           p0=list(data["certified"].values()), xtol=1e-15, ftol=1e-15, gtol=1e-15)
    problem = nist_problem(data, bounds)
    est = summarise(problem, [run_start(problem, 0, data["starts"][1])])
    np.testing.assert_allclose(est.x, popt, rtol=1e-7)
    np.testing.assert_allclose(est.covariance, pcov, rtol=1e-5)
    se = np.sqrt(np.diag(pcov))
    from scipy.stats import t
    half = t.ppf(0.975, data["dof"]) * se
    np.testing.assert_allclose(est.ci95, np.column_stack([popt - half, popt + half]), rtol=1e-6)
    corr = pcov[0, 1] / (se[0] * se[1])
    assert est.correlation[0, 1] == pytest.approx(corr, rel=1e-5)


def pinene_problem(**kw) -> Problem:
    e = Experiment("box1973", (0.0, float(R.PINENE_TIMES[-1])), R.PINENE_TIMES,
                   {f"y{i + 1}": R.PINENE_DATA[:, i] for i in range(5)})
    unknowns = tuple(Unknown(f"p{i}", 1e-6, 1e-3) for i in range(1, 6))  # three decades
    return Problem(R.PINENE_MODEL, (e,), {f"y{i}": f"y{i}" for i in range(1, 6)}, {}, unknowns, **kw)


def pinene_reference():
    """The exact-ODE optimum by an independent route: y(t) = expm(A t) y0 with SciPy's
    least_squares at tight tolerances."""
    y0 = np.array([100.0, 0, 0, 0, 0])

    def residuals(z):
        A = R.pinene_matrix(10.0 ** z)
        return np.concatenate([expm(A * t) @ y0 for t in R.PINENE_TIMES]) - R.PINENE_DATA.ravel()

    res = least_squares(residuals, np.log10([6e-5, 3e-5, 2e-5, 3e-4, 4e-5]), xtol=1e-15, ftol=1e-15,
                        gtol=1e-15)
    return 10.0 ** res.x, 2 * res.cost


def test_alpha_pinene_optimum_from_starts_spread_over_three_decades():
    # Box, Hunter, MacGregor & Erjavec (1973); published optimum (from memory) about 19.87 with
    # rate constants about 5.93e-5, 2.96e-5, 2.05e-5, 27.5e-5, 4.0e-5 per minute
    problem = pinene_problem()
    assert check(problem) == []
    x0 = starts(problem, 20, seed=1)
    assert np.log10(x0.max(axis=0) / x0.min(axis=0)).min() > 2.5  # the starts span the decades
    outcomes = [run_start(problem, i, x) for i, x in enumerate(x0)]
    est = summarise(problem, outcomes)
    assert est.reached_best == 20, [(o.sum_of_squares, o.message) for o in est.starts]
    assert est.sum_of_squares == pytest.approx(R.PINENE_PUBLISHED["sum_of_squares"], abs=0.005)
    for j in range(5):
        published = R.PINENE_PUBLISHED[f"p{j + 1}"]
        assert est.x[j] == pytest.approx(published, rel=0.01)
    x_ref, ssr_ref = pinene_reference()
    np.testing.assert_allclose(est.x, x_ref, rtol=1e-5)
    assert est.sum_of_squares == pytest.approx(ssr_ref, rel=1e-8)
    assert not any(est.at_bound) and all(np.isfinite(est.standard_error))
    json.dumps(est.to_json(), allow_nan=False)
