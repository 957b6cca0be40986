"""Each method against published problems with independent oracles.

Errors are measured in tolerance units: |y - y_ref| / (atol + rtol |y_ref|).
"""
import numpy as np
import pytest
import scipy.linalg
from scipy.integrate import solve_ivp

from engine.integrate import SUCCEEDED, SolverOptions, integrate
from tests.engine import kernels as K

METHODS = ["dormand_prince_54", "radau_iia_5", "rosenbrock_4", "auto"]
STIFF_METHODS = ["radau_iia_5", "rosenbrock_4", "auto"]


def tol_units(y, ref, rtol, atol):
    return float(np.max(np.abs(y - ref) / (atol + rtol * np.abs(ref))))


def solve(model, t_end, method, rtol, atol, **kw):
    return integrate(model.kernel, model.p, model.y0, (0.0, t_end), np.array([t_end]),
                     SolverOptions(method=method, rtol=rtol, atol=atol, **kw))


_refs = {}


def scipy_reference(spec, t_end):
    """SciPy Radau at rtol 1e-12 through the same kernel (second opinion)."""
    key = (spec["title"], t_end)
    if key not in _refs:
        m = K.model(spec)
        f, jac = K.scipy_rhs(m.kernel, m.p)
        sol = solve_ivp(f, (0.0, t_end), m.y0, method="Radau", jac=jac, rtol=1e-12,
                        atol=1e-16)
        _refs[key] = sol.y[:, -1]
    return _refs[key]


# Test Set for IVP Solvers (Mazzia & Magherini, Univ. Bari), Robertson at t = 1e11;
# values from memory, confirmed below against SciPy.
ROBERTSON_1E11 = np.array([0.2083340149701255e-07, 0.8333360770334713e-13,
                           0.9999999791665050])
# Test Set for IVP Solvers, HIRES at t = 321.8122; values from memory.
HIRES_END_REF = np.array([0.7371312573325668e-3, 0.1442485726316185e-3,
                          0.5888729740967575e-4, 0.1175651343283149e-2,
                          0.2386356198831331e-2, 0.6238968252742796e-2,
                          0.2849998395185769e-2, 0.2850001604814231e-2])


def test_published_values_agree_with_scipy_second_opinion():
    assert tol_units(ROBERTSON_1E11, scipy_reference(K.ROBERTSON, 1e11), 1e-8, 1e-18) < 1
    assert tol_units(HIRES_END_REF, scipy_reference(K.HIRES, K.HIRES_END), 1e-8, 1e-18) < 1


@pytest.mark.parametrize("method", STIFF_METHODS)
def test_robertson_to_1e11(method):
    # Hairer & Wanner II, sec. IV.1 and IV.10; Test Set for IVP Solvers.
    rtol, atol = 1e-6, 1e-10
    sol = solve(K.model(K.ROBERTSON), 1e11, method, rtol, atol)
    assert sol.outcome == SUCCEEDED
    assert tol_units(sol.y[-1], ROBERTSON_1E11, rtol, atol) < 10
    # y1 + y2 + y3 = 1 is conserved by the exact solution.
    assert abs(sol.y[-1].sum() - 1.0) < 1e-10
    r = sol.report
    assert r["accepted_steps"] < 600 and r["rejected_steps"] < 60
    assert r["jacobian_evaluations"] < 600 and r["lu_factorizations"] < 700


@pytest.mark.parametrize("method", STIFF_METHODS)
def test_hires(method):
    # Schaefer 1975; Hairer & Wanner II, sec. IV.10; Test Set for IVP Solvers.
    rtol, atol = 1e-7, 1e-11
    sol = solve(K.model(K.HIRES), K.HIRES_END, method, rtol, atol)
    assert sol.outcome == SUCCEEDED
    assert tol_units(sol.y[-1], HIRES_END_REF, rtol, atol) < 10
    assert sol.report["accepted_steps"] < 1000


@pytest.mark.parametrize("method", STIFF_METHODS)
def test_van_der_pol_mu_1000(method):
    # Hairer & Wanner II, sec. IV.1; oracle: SciPy Radau at rtol 1e-12.
    rtol, atol = 1e-7, 1e-9
    t_end = 3000.0
    sol = solve(K.model(K.VAN_DER_POL), t_end, method, rtol, atol)
    assert sol.outcome == SUCCEEDED
    ref = scipy_reference(K.VAN_DER_POL, t_end)
    # The relaxation oscillation amplifies timing errors near the fast jumps;
    # the end point (x, v) is on the slow branch, compared in tolerance units.
    assert tol_units(sol.y[-1], ref, rtol, atol) < 10
    assert sol.report["accepted_steps"] < 5000


@pytest.mark.parametrize("method", METHODS)
def test_arenstorf_orbit_is_periodic(method):
    # Hairer, Norsett & Wanner I, sec. II.0: the orbit closes after one period.
    rtol, atol = 1e-10, 1e-12
    m = K.model(K.ARENSTORF)
    sol = solve(m, K.ARENSTORF_PERIOD, method, rtol, atol, max_steps=200_000)
    assert sol.outcome == SUCCEEDED
    assert np.max(np.abs(sol.y[-1] - m.y0)) < 1e-4  # global error after close approaches
    ref = scipy_reference(K.ARENSTORF, K.ARENSTORF_PERIOD)
    assert np.max(np.abs(sol.y[-1] - ref)) < 1e-4


@pytest.mark.parametrize("method", METHODS)
def test_linear_system_matches_matrix_exponential(method):
    # Oracle: scipy.linalg.expm. Eigenvalues invented: -1, -10, -100, -2000.
    A = K.matrix_with_eigenvalues([-1.0, -10.0, -100.0, -2000.0])
    kern = K.linear_kernel(A)
    y0 = np.array([1.0, 2.0, 3.0, 4.0])
    times = np.linspace(0.0, 2.0, 9)
    rtol, atol = 1e-8, 1e-12
    sol = integrate(kern, np.zeros(0), y0, (0.0, 2.0), times,
                    SolverOptions(method=method, rtol=rtol, atol=atol))
    assert sol.outcome == SUCCEEDED
    assert len(sol.t) == len(times)
    for t, y in zip(sol.t, sol.y):
        ref = scipy.linalg.expm(t * A) @ y0
        # dense output at interior points, step end at t = 2
        assert tol_units(y, ref, rtol, atol) < 10


@pytest.mark.parametrize("method", METHODS)
def test_dense_output_matches_oracle_between_steps(method):
    # Many output points, no forced steps: accepted steps do not grow with outputs.
    m = K.model(K.HIRES)
    rtol, atol = 1e-8, 1e-12
    few = integrate(m.kernel, m.p, m.y0, (0.0, 5.0), np.array([5.0]),
                    SolverOptions(method=method, rtol=rtol, atol=atol))
    times = np.linspace(0.0, 5.0, 401)
    many = integrate(m.kernel, m.p, m.y0, (0.0, 5.0), times,
                     SolverOptions(method=method, rtol=rtol, atol=atol))
    assert many.report["accepted_steps"] == few.report["accepted_steps"]
    f, jac = K.scipy_rhs(m.kernel, m.p)
    ref = solve_ivp(f, (0.0, 5.0), m.y0, method="Radau", jac=jac, rtol=1e-12, atol=1e-16,
                    t_eval=times).y.T
    err = np.max(np.abs(many.y - ref) / (atol + rtol * np.abs(ref)))
    assert err < 100  # interpolants are one order below the method (tolerance units)


@pytest.mark.parametrize("method", METHODS)
def test_repeated_calls_give_identical_results(method):
    # integrate() reuses the arrays of a finished run for the next call of the same
    # shapes: nothing of one run may leak into the next, whatever ran in between
    model = K.model(K.ROBERTSON)
    t_out = np.array([0.0, 1.0, 10.0, 40.0])

    def once(**kw):
        return integrate(model.kernel, model.p, model.y0, (0.0, 40.0), t_out,
                         SolverOptions(method=method, rtol=1e-6, atol=1e-10,
                                       diagnostics="counts", **kw))

    first = once()
    once(nonnegative=True, first_step=1e-3, max_steps=7)  # a different run in between
    again = once()
    np.testing.assert_array_equal(first.y, again.y)
    for key in ("accepted_steps", "rejected_steps", "rhs_evaluations",
                "jacobian_evaluations", "lu_factorizations", "switch_count"):
        assert first.report[key] == again.report[key]
    assert first.y is not again.y and not np.shares_memory(first.y, again.y)


def test_counts_report_matches_the_full_report_and_survives_later_runs():
    # diagnostics="counts" builds the report on first read, from a copy of the run's
    # counters taken at the end of the solve: later runs (which reuse the same arrays)
    # must not change it, and its counts are those of a "full" run
    model = K.model(K.ROBERTSON)
    t_out = np.array([0.0, 1.0, 10.0, 40.0])

    def once(diagnostics, rtol=1e-6):
        return integrate(model.kernel, model.p, model.y0, (0.0, 40.0), t_out,
                         SolverOptions(rtol=rtol, atol=1e-10, diagnostics=diagnostics),
                         conservation=np.ones((1, 3)))

    lean = once("counts")
    once("counts", rtol=1e-3)  # reuses the pooled run of the same shapes
    full = once("full")
    for key in ("accepted_steps", "rejected_steps", "rhs_evaluations", "jacobian_evaluations",
                "lu_factorizations", "newton_iterations", "steps_per_method", "switch_count",
                "switches", "explicit_steps_needed", "t_reached", "conservation_drift"):
        assert lean.report[key] == full.report[key], key
    assert lean.report["switch_count"] >= 1 and lean.report["seconds_per_method"] is None
    assert lean.report is lean.report  # built once
    assert lean.report["solve_seconds"] > 0.0  # measured (speed itself lives in bench/)


def test_a_counts_solution_is_freed_without_the_cycle_collector():
    # sweeps create many solutions: each must be freed by reference counting alone
    import gc
    import weakref
    model = K.model(K.ROBERTSON)
    sol = integrate(model.kernel, model.p, model.y0, (0.0, 40.0), np.array([40.0]),
                    SolverOptions(diagnostics="counts"), conservation=np.ones((1, 3)))
    ref = weakref.ref(sol)
    gc.disable()
    try:
        del sol
        assert ref() is None
    finally:
        gc.enable()


def test_frozen_event_flags_reuse_the_compiled_loop_the_warm_up_loaded():
    # A prepared model's arrays are read-only; integrate must hand the compiled loop the
    # same array types as the warm-up does, or each worker process loads a second
    # specialisation on its first job.
    from engine.integrators import driver
    spec = dict(K.VAN_DER_POL, events=[{"name": "x_zero", "when": "x", "direction": "falling"}])
    m = K.model(spec)
    assert not m.event_directions.flags.writeable
    kinds = []
    for dirs, term in ((m.event_directions.copy(), m.event_terminal.copy()),
                       (m.event_directions, m.event_terminal)):
        solve(m, 1.0, "auto", 1e-6, 1e-9, event_directions=dirs, event_terminal=term)
        kinds.append(len(driver.advance.signatures))
    assert kinds[0] == kinds[1]
