"""Radau IIA (order 5) on the sparse path (engine.integrators.sparse.radau, SuperLU).

Oracles: SciPy's solve_ivp at rtol 1e-10/1e-11 on the same right-hand side and
sparsity (2-D Brusselator of Hairer & Wanner II, sec. IV.10; 1-D Brusselator of
Hairer & Wanner II, sec. IV.1, eq. (1.6'); parameters as printed there, recalled from
memory), and closed-form solutions of linear
decays for events and non-negativity.
"""
import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.sparse import coo_matrix

from engine.integrate import NON_FINITE, SUCCEEDED, SolverOptions, integrate
from engine.integrators.sparse.core import wants_sparse
from tests.engine import kernels as K
from tests.engine.test_sparse_scipy import N as N_1D, T_END as T_END_1D, bruss_1d

N_2D = 12  # 2 x 12^2 = 288 states


def _sparsity(kernel):
    return coo_matrix((np.ones(len(kernel.jac_rows)), (kernel.jac_rows, kernel.jac_cols)),
                      shape=(kernel.n,) * 2)


@pytest.fixture(scope="module")
def bruss2d():
    b = K.brusselator_2d(N_2D)
    f, _ = K.scipy_rhs(b.kernel, b.p)
    ref = solve_ivp(f, (0.0, 2.0), b.y0, method="Radau", rtol=1e-11, atol=1e-13,
                    jac_sparsity=_sparsity(b.kernel))
    assert ref.success
    return b, ref.y[:, -1]


@pytest.fixture(scope="module")
def bruss1d():
    m = K.model(bruss_1d(N_1D))
    f, _ = K.scipy_rhs(m.kernel, m.p)
    ref = solve_ivp(f, (0.0, T_END_1D), m.y0, method="Radau", rtol=1e-10, atol=1e-12,
                    jac_sparsity=_sparsity(m.kernel), t_eval=[5.0, T_END_1D])
    assert ref.success
    return m, ref.y.T


def _check_report(r):
    assert r["sparse_linear_algebra"] is True
    assert r["methods_used"] == ["radau_iia_5"]
    assert r["lu_factorizations"] < r["accepted_steps"]  # factors are reused
    assert r["warnings"] == []  # radau_iia_5 ran as asked


@pytest.mark.parametrize("rtol", [1e-4, 1e-6, 1e-8])
def test_pinned_radau_iia_5_on_the_2d_brusselator(bruss2d, rtol):
    # Oracle: SciPy Radau at rtol 1e-11. A one-step collocation method keeps its
    # global error near the requested tolerance (Hairer & Wanner II, sec. IV.8):
    # within 10x, at every state.
    b, ref = bruss2d
    assert wants_sparse(b.kernel)
    atol = 1e-3 * rtol
    sol = integrate(b.kernel, b.p, b.y0, (0.0, 2.0), np.linspace(0, 2, 5),
                    SolverOptions(method="radau_iia_5", rtol=rtol, atol=atol))
    assert sol.outcome == SUCCEEDED
    _check_report(sol.report)
    err = np.abs(sol.y[-1] - ref) / (atol + rtol * np.abs(ref))
    assert err.max() < 10


@pytest.mark.parametrize("rtol", [1e-4, 1e-6])
def test_pinned_radau_iia_5_on_the_1d_brusselator(bruss1d, rtol):
    # Oracle: SciPy Radau at rtol 1e-10 (tests/engine/test_sparse_scipy.py), at two
    # output times; within 10x the requested tolerance at every state.
    m, ref = bruss1d
    atol = 1e-3 * rtol
    sol = integrate(m.kernel, m.p, m.y0, (0.0, T_END_1D), np.array([5.0, T_END_1D]),
                    SolverOptions(method="radau_iia_5", rtol=rtol, atol=atol))
    assert sol.outcome == SUCCEEDED
    r = sol.report
    _check_report(r)
    err = np.abs(sol.y - ref) / (atol + rtol * np.abs(ref))
    assert err.max() < 10
    assert r["newton_iterations"] < 3 * r["accepted_steps"]


def _decays(n_u=300, event=True):
    """u_i' = -k_i u_i with rates from 1 to 1e4 (stiff, diagonal Jacobian):
    u_i(t) = u_i(0) exp(-k_i t). Event: u0 (k = 2, u0(0) = 1) falls to 1/4
    at t* = ln(4) / 2."""
    rates = np.geomspace(1.0, 1e4, n_u)
    rates[0] = 2.0
    states = {f"u{i}": 1.0 for i in range(n_u)}
    spec = {"states": states,
            "parameters": {f"k{i}": float(rates[i]) for i in range(n_u)},
            "ddt": {f"u{i}": f"-k{i}*u{i}" for i in range(n_u)}}
    if event:
        spec["events"] = [{"name": "low", "when": "u0 - 0.25", "direction": "falling",
                           "stop": True}]
    return K.model(spec), rates


def test_terminal_event_on_the_sparse_path():
    # Located on the collocation polynomial: 100 tolerance units of the analytic t*.
    m, rates = _decays()
    assert wants_sparse(m.kernel)
    rtol = 1e-9
    sol = integrate(m.kernel, m.p, m.y0, (0.0, 5.0), np.linspace(0, 5, 51),
                    SolverOptions(method="radau_iia_5", rtol=rtol, atol=1e-13,
                                  event_directions=m.event_directions,
                                  event_terminal=m.event_terminal))
    t_star = math.log(4.0) / 2.0
    assert sol.outcome == SUCCEEDED and sol.terminal_event == 0
    assert sol.report["methods_used"] == ["radau_iia_5"]
    assert sol.t_reached == pytest.approx(t_star, rel=100 * rtol)
    assert sol.event_t[0] == pytest.approx(t_star, rel=100 * rtol)
    assert sol.event_y[0, 0] == pytest.approx(0.25, rel=100 * rtol)
    assert sol.t[-1] <= t_star
    exact = np.exp(-np.outer(sol.t, rates))
    assert np.max(np.abs(sol.y - exact) / (1e-13 + rtol * exact)) < 100


def test_nonnegative_states_on_the_sparse_path():
    # Loose tolerance on fast decays: the interpolant and the steps may dip below
    # zero; with nonnegative=True every output stays >= 0 and near the exact value.
    m, rates = _decays(event=False)
    rtol, atol = 1e-3, 1e-6
    t_out = np.linspace(0, 3, 31)
    sol = integrate(m.kernel, m.p, m.y0, (0.0, 3.0), t_out,
                    SolverOptions(method="radau_iia_5", rtol=rtol, atol=atol, nonnegative=True))
    assert sol.outcome == SUCCEEDED
    assert sol.report["methods_used"] == ["radau_iia_5"]
    assert sol.report["sparse_linear_algebra"] is True
    assert np.all(sol.y >= 0.0)
    exact = np.exp(-np.outer(t_out, rates))
    assert np.max(np.abs(sol.y - exact)) < 10 * (atol + rtol)


def test_non_finite_rhs_on_the_sparse_path():
    # sqrt(1 - t) is not finite past t = 1 (as in test_integrate_outcomes).
    n = 300
    spec = {"states": {f"y{i}": 0.0 for i in range(n)},
            "ddt": {f"y{i}": f"sqrt(1 - t) - y{i}" for i in range(n)}}
    m = K.model(spec)
    assert wants_sparse(m.kernel)
    sol = integrate(m.kernel, m.p, m.y0, (0.0, 2.0), np.array([2.0]),
                    SolverOptions(method="radau_iia_5", rtol=1e-6, atol=1e-10))
    assert sol.outcome == NON_FINITE
    assert sol.t_reached == pytest.approx(1.0, abs=1e-6)
    assert np.all(np.isfinite(sol.y_reached))
