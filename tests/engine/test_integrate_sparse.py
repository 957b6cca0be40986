"""Large sparse systems: SuperLU on the Jacobian pattern (engine.integrators.sparse.core, engine.integrators.sparse.bdf)."""
import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.sparse import coo_matrix

from engine.integrate import SUCCEEDED, SolverOptions, integrate
from engine.integrators.sparse.core import wants_sparse
from tests.engine import kernels as K

N = 12  # 2 x 12^2 = 288 states, 6 non-zeros per row: takes the sparse path


@pytest.fixture(scope="module")
def bruss():
    b = K.brusselator_2d(N)
    f, _ = K.scipy_rhs(b.kernel, b.p)
    pattern = coo_matrix((np.ones(len(b.kernel.jac_rows)),
                          (b.kernel.jac_rows, b.kernel.jac_cols)), shape=(b.kernel.n,) * 2)
    ref = solve_ivp(f, (0.0, 2.0), b.y0, method="BDF", rtol=1e-11, atol=1e-13,
                    jac_sparsity=pattern).y[:, -1]
    return b, ref


def test_brusselator_takes_the_sparse_path(bruss):
    b, _ = bruss
    assert wants_sparse(b.kernel)


@pytest.mark.parametrize("method", ["auto", "bdf", "rosenbrock_4"])
def test_brusselator_matches_scipy(bruss, method):
    # Hairer & Wanner II, sec. IV.10 (BRUSS-2D without source); oracle: SciPy BDF
    # at rtol 1e-11 with the same right-hand side.
    b, ref = bruss
    rtol, atol = 1e-6, 1e-9
    sol = integrate(b.kernel, b.p, b.y0, (0.0, 2.0), np.linspace(0, 2, 5),
                    SolverOptions(method=method, rtol=rtol, atol=atol))
    assert sol.outcome == SUCCEEDED
    r = sol.report
    assert r["sparse_linear_algebra"] is True
    err = np.max(np.abs(sol.y[-1] - ref) / (atol + rtol * np.abs(ref)))
    assert err < 100  # global error of a multistep method, in tolerance units
    if method != "rosenbrock_4":
        # auto starts explicit and goes to the sparse BDF once diffusion limits the step
        assert r["methods_used"] == (["dormand_prince_54", "bdf"] if method == "auto" else ["bdf"])
        assert r["lu_factorizations"] < r["steps_per_method"]["bdf"]  # factors are reused
        assert r["jacobian_evaluations"] < 20
    if method == "auto":
        first = r["switches"][0]
        assert (first["from"], first["to"], first["reason"]) == \
            ("dormand_prince_54", "bdf", "stiffness_detected")


def test_pinned_bdf_on_a_small_stiff_problem():
    # Robertson to t = 1e5 vs SciPy Radau at rtol 1e-12 (second opinion).
    m = K.model(K.ROBERTSON)
    rtol, atol = 1e-7, 1e-12
    sol = integrate(m.kernel, m.p, m.y0, (0.0, 1e5), np.array([1e5]),
                    SolverOptions(method="bdf", rtol=rtol, atol=atol))
    f, jac = K.scipy_rhs(m.kernel, m.p)
    ref = solve_ivp(f, (0, 1e5), m.y0, method="Radau", jac=jac, rtol=1e-12,
                    atol=1e-16).y[:, -1]
    assert sol.outcome == SUCCEEDED
    assert np.max(np.abs(sol.y[-1] - ref) / (atol + rtol * np.abs(ref))) < 100
    assert abs(sol.y[-1].sum() - 1.0) < 1e-10


def test_auto_returns_to_explicit_when_a_large_model_stops_being_stiff():
    # 300 relaxing states driven by a decaying fast rate: u_i' = -(k c + 1) u_i + 1,
    # c' = -5 c. While k c is large the step is stability-bound (stiff); once c has
    # decayed the problem is non-stiff and explicit steps are cheaper again (common
    # practice for switching codes). Oracle: SciPy Radau at rtol 1e-10.
    n_u = 300
    states = {"c": 1.0, **{f"u{i}": 0.001 * i for i in range(n_u)}}
    ddt = {"c": "-5*c", **{f"u{i}": "-(k*c + 1)*u%d + 1" % i for i in range(n_u)}}
    m = K.model({"states": states, "parameters": {"k": 1e4}, "ddt": ddt})
    assert wants_sparse(m.kernel)
    rtol, atol = 1e-6, 1e-9
    t_end = 12.0
    sol = integrate(m.kernel, m.p, m.y0, (0.0, t_end), np.array([1.0, t_end]),
                    SolverOptions(method="auto", rtol=rtol, atol=atol))
    assert sol.outcome == SUCCEEDED
    r = sol.report
    moves = [(w["from"], w["to"], w["reason"]) for w in r["switches"]]
    assert ("dormand_prince_54", "bdf", "stiffness_detected") in moves
    assert ("bdf", "dormand_prince_54", "explicit_step_competitive") in moves
    f, jac = K.scipy_rhs(m.kernel, m.p)
    ref = solve_ivp(f, (0.0, t_end), m.y0, method="Radau", jac=jac, rtol=1e-10,
                    atol=1e-13, t_eval=[1.0, t_end]).y.T
    # global error of the multistep phase, in tolerance units (as above)
    assert np.max(np.abs(sol.y - ref) / (atol + rtol * np.abs(ref))) < 100
