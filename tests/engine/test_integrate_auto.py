"""Automatic switching: implicit phases where stiff, none where not; the
stability-limited explicit step in the report; the policy's parameters."""
import numpy as np
import pytest

from engine.integrate import SUCCEEDED, SolverOptions, integrate
from engine.integrators.switching import SwitchPolicy
from tests.engine import kernels as K


def run(spec, t_end, **kw):
    m = K.model(spec)
    return integrate(m.kernel, m.p, m.y0, (0.0, t_end), np.array([t_end]),
                     SolverOptions(method="auto", **kw))


@pytest.mark.parametrize("spec,t_end", [(K.ROBERTSON, 1e11), (K.HIRES, K.HIRES_END),
                                        (K.VAN_DER_POL, 3000.0)])
@pytest.mark.parametrize("rtol", [1e-4, 1e-6, 1e-9])
def test_stiff_problems_get_implicit_phases(spec, t_end, rtol):
    sol = run(spec, t_end, rtol=rtol, atol=rtol * 1e-4)
    r = sol.report
    assert sol.outcome == SUCCEEDED
    implicit = r["steps_per_method"]["radau_iia_5"] + r["steps_per_method"]["rosenbrock_4"]
    assert implicit > 0
    assert r["switches"][0]["reason"] == "stiffness_detected"
    assert r["switches"][0]["from"] == "dormand_prince_54"
    # Radau IIA below rtol 5e-4, Rosenbrock at looser tolerances (the policy default).
    assert r["switches"][0]["to"] == ("radau_iia_5" if rtol < 5e-4 else "rosenbrock_4")
    # Work ceilings: a broken stiff path would take explicit-sized steps.
    assert r["accepted_steps"] < 4000
    assert r["explicit_steps_needed"] > 10 * r["accepted_steps"] or spec is K.HIRES


@pytest.mark.parametrize("spec,t_end", [(K.ARENSTORF, K.ARENSTORF_PERIOD), (K.LORENZ, 20.0)])
@pytest.mark.parametrize("rtol", [1e-3, 1e-6, 1e-9])
def test_nonstiff_problems_stay_explicit(spec, t_end, rtol):
    sol = run(spec, t_end, rtol=rtol, atol=rtol * 1e-3)
    r = sol.report
    assert sol.outcome == SUCCEEDED
    assert r["switch_count"] == 0 and r["methods_used"] == ["dormand_prince_54"]
    assert r["lu_factorizations"] == 0


def dormand_prince_54_stability_polynomial(z):
    # Stability function of the 5th-order Dormand-Prince solution (Hairer, Norsett &
    # Wanner I, sec. IV.2 / Hairer & Wanner II, sec. IV.2; from memory):
    # the degree-5 Taylor polynomial plus z^6/600.
    return 1 + z + z**2 / 2 + z**3 / 6 + z**4 / 24 + z**5 / 120 + z**6 / 600


def real_axis_boundary():
    """Largest x with |R(-s)| <= 1 on [0, x], by bisection on a fine scan."""
    s = np.linspace(0.0, 5.0, 50001)
    bad = np.nonzero(np.abs(dormand_prince_54_stability_polynomial(-s)) > 1 + 1e-12)[0]
    lo, hi = s[bad[0] - 1], s[bad[0]]
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if abs(dormand_prince_54_stability_polynomial(-mid)) <= 1 else (lo, mid)
    return lo


def test_engine_tableau_has_the_published_stability_polynomial():
    from engine.integrators.tableaux import DP_A
    A, b = DP_A[:6, :6], DP_A[6, :6]
    for z in (-0.5, -1.7, -3.0, 0.3):
        r = 1 + z * b @ np.linalg.solve(np.eye(6) - z * A, np.ones(6))
        assert r == pytest.approx(dormand_prince_54_stability_polynomial(z), rel=1e-12)


def test_report_explicit_step_matches_stability_boundary():
    boundary = real_axis_boundary()
    assert 3.2 < boundary < 3.4
    lams = [-1.0, -50.0, -3000.0]  # invented, real and negative
    A = K.matrix_with_eigenvalues(lams)
    kern = K.linear_kernel(A)
    sol = integrate(kern, np.zeros(0), np.ones(3), (0.0, 5.0), np.linspace(0, 5, 11),
                    SolverOptions(method="auto", rtol=1e-6, atol=1e-10))
    r = sol.report
    expected = boundary / 3000.0
    for s in r["stiffness_samples"]:
        assert s["explicit_step"] == pytest.approx(expected, rel=0.01)
        assert s["stiffness_ratio"] == pytest.approx(3000.0, rel=1e-6)
        assert s["dominant_eigenvalues"][0][0] == pytest.approx(-3000.0, rel=1e-9)
    # In-run estimates (power iteration while implicit) agree within 5 %.
    hist = r["step_history"]
    implicit = [e for e, m in zip(hist["explicit_step"], hist["method"]) if m != "dormand_prince_54"]
    assert implicit and np.allclose(implicit, expected, rtol=0.05)
    # A stability-bound explicit solver needs about 5 / h_stab steps.
    assert r["explicit_steps_needed"] == pytest.approx(5.0 / expected, rel=0.1)
    assert r["accepted_steps"] < 0.2 * r["explicit_steps_needed"]


def test_policy_is_parameterised():
    never = SwitchPolicy(stiff_tests=10**9)
    sol = run(K.ROBERTSON, 1.0, rtol=1e-6, atol=1e-10, policy=never)
    assert sol.report["switch_count"] == 0
    radau_always = SwitchPolicy(radau_below_rtol=1.0)
    sol = run(K.ROBERTSON, 1e3, rtol=1e-6, atol=1e-10, policy=radau_always)
    assert sol.report["switches"][0]["to"] == "radau_iia_5"
    rosenbrock_4_always = SwitchPolicy(radau_below_rtol=0.0)
    sol = run(K.ROBERTSON, 1e3, rtol=1e-6, atol=1e-10, policy=rosenbrock_4_always)
    assert sol.report["switches"][0]["to"] == "rosenbrock_4"


def test_switch_log_rows_carry_the_numbers():
    sol = run(K.VAN_DER_POL, 3000.0, rtol=1e-6, atol=1e-9)
    r = sol.report
    assert r["switch_count"] >= 2  # relaxation oscillation: stiff and non-stiff phases
    for row in r["switches"]:
        assert set(row) == {"t", "from", "to", "h", "rho", "explicit_step", "reason", "explanation"}
        assert row["rho"] > 0 and row["h"] > 0
    back = [w for w in r["switches"] if w["to"] == "dormand_prince_54"]
    assert back and all(w["reason"] == "explicit_step_competitive" for w in back)
    assert all(w["explicit_step"] >= w["h"] for w in back)


@pytest.mark.parametrize("scale", [1e-120, 1e-3, 1.0, 1e4, 1e120, 1e150])
def test_power_iteration_estimates_the_spectral_radius_at_any_scale(scale):
    # spectral radius = largest |eigenvalue| (numpy.linalg.eigvals as the reference);
    # the estimate (||J^k v|| / ||v||)^(1/k) from a cold start with six iterations must
    # land within 25 % for a matrix with a clear dominant eigenvalue, at every scale
    from engine.integrators.switching import spectral_radius
    rng = np.random.default_rng(7)
    Q = np.linalg.qr(rng.standard_normal((6, 6)))[0]
    lam = np.array([-40.0, -3.0, -1.0, -0.5, -0.2, -0.1])
    J = scale * (Q @ np.diag(lam) @ Q.T)
    ref = np.max(np.abs(np.linalg.eigvals(J)))
    est = spectral_radius(J, np.zeros(6), np.zeros(6), 6)
    assert np.isfinite(est) and est == pytest.approx(ref, rel=0.25)


def test_a_switch_in_a_mildly_stiff_drug_model_is_right_and_explained():
    # Invented two-compartment model with first-order absorption (rates in 1/h). Once the dose
    # has left the gut, the absorption rate ka = 1.2 still bounds the explicit step at
    # 3.3 / 1.2 (stability) while the slow elimination would allow far longer steps: a switch
    # is correct there. The fastest rate is checked against numpy's eigenvalues of the
    # (linear) system matrix.
    ka, k12, k21, ke = 1.2, 0.3, 0.15, 0.08
    m = K.model({"states": {"gut": 100.0, "central": 0.0, "periph": 0.0},
               "parameters": {"ka": ka, "k12": k12, "k21": k21, "ke": ke},
               "ddt": {"gut": "-ka*gut", "central": "ka*gut - k12*central + k21*periph - ke*central",
                       "periph": "k12*central - k21*periph"}})
    A = np.array([[-ka, 0, 0], [ka, -k12 - ke, k21], [0, k12, -k21]])
    fastest = max(abs(np.linalg.eigvals(A)))
    t = np.linspace(0, 200, 201)
    sol = integrate(m.kernel, m.p, m.y0, (0.0, 200.0), t, SolverOptions(rtol=1e-6, atol=1e-9))
    first = sol.report["switches"][0]
    assert first["reason"] == "stiffness_detected" and first["t"] > 30  # after the absorption
    assert first["rho"] == pytest.approx(fastest, rel=0.05)
    assert first["h"] >= 0.9 * first["explicit_step"]  # the step was at its stability limit
    assert "stability, not accuracy" in first["explanation"] and f"{first['t']:.4g}" in first["explanation"]
