"""Forward sensitivities dy/dθ (engine.sensitivities): closed forms, SciPy at tight
tolerance on hand-written sensitivity equations, conservation, every method, both tiers."""
from __future__ import annotations

import functools
import json
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from engine.integrate import SolverOptions, integrate
from engine.kernels import native
from engine.model import ModelError
from engine.sensitivities import prepare_sensitivities, split

MODELS = Path(__file__).resolve().parents[2] / "examples" / "models"
DECAY = {"states": {"a": 2.0}, "parameters": {"k": 0.7}, "ddt": {"a": "-k*a"}}


def solve(sm, t_out, span, method="auto", rtol=1e-9, atol=1e-12, error_control=True, kernel=None, p=None):
    p = sm.base.p if p is None else p
    y0 = sm.base.y0
    o = SolverOptions(method=method, rtol=rtol, atol=sm.atol(atol, p, y0, error_control),
                      nonnegative=sm.nonnegative(sm.base.nonnegative))
    sol = integrate(kernel or sm.augmented.kernel, p, sm.initial_state(y0), span, t_out, o)
    assert sol.outcome == "succeeded", sol.message
    y, s = split(sm, sol.y, sm.values(p, y0))
    return sol, y, s


@pytest.mark.parametrize("method", ["auto", "dormand_prince_54", "radau_iia_5", "rosenbrock_4", "bdf"])
def test_first_order_decay_matches_its_closed_form(method):
    # a(t) = a0 exp(-k t): da/dk = -t a0 exp(-k t), da/da0 = exp(-k t), d ln a / d ln k = -k t
    # (calculus; any kinetics textbook)
    sm = prepare_sensitivities(DECAY, ["k"], ["a"])
    t = np.linspace(0.0, 5.0, 11)
    _, _, s = solve(sm, t, (0.0, 5.0), method)
    assert s.wrt == ("k", "init:a")
    np.testing.assert_allclose(s.raw[:, 0, 0], -t * 2.0 * np.exp(-0.7 * t), rtol=1e-6, atol=1e-9)
    np.testing.assert_allclose(s.raw[:, 0, 1], np.exp(-0.7 * t), rtol=1e-6, atol=1e-9)
    np.testing.assert_allclose(s.normalised[1:, 0, 0], -0.7 * t[1:], rtol=1e-6)
    np.testing.assert_allclose(s.normalised[:, 0, 1], 1.0, rtol=1e-6)


@functools.lru_cache(maxsize=None)
def robertson_reference(t_out: tuple):
    """Robertson's kinetics (Hairer & Wanner II, sec. IV.1) with the sensitivity equations for
    k1, k2, k3 written out by hand (Jacobian and df/dk), solved by SciPy's Radau at rtol 1e-10."""
    k1, k2, k3 = 0.04, 3e7, 1e4

    def J_of(y1, y2, y3):
        return np.array([[-k1, k3 * y3, k3 * y2],
                         [k1, -2 * k2 * y2 - k3 * y3, -k3 * y2],
                         [0.0, 2 * k2 * y2, 0.0]])

    def f(t, z):
        y1, y2, y3 = z[:3]
        fy = np.array([-k1 * y1 + k3 * y2 * y3, k1 * y1 - k2 * y2 ** 2 - k3 * y2 * y3, k2 * y2 ** 2])
        J = J_of(y1, y2, y3)
        fp = np.array([[-y1, 0.0, y2 * y3], [y1, -y2 ** 2, -y2 * y3], [0.0, y2 ** 2, 0.0]])
        S = z[3:].reshape(3, 3).T  # columns: d y / d k_j
        return np.concatenate([fy, (J @ S + fp).T.ravel()])

    def jac(t, z):  # the exact Jacobian of the whole system, by hand
        y1, y2, y3 = z[:3]
        S = z[3:].reshape(3, 3).T
        out = np.kron(np.eye(4), J_of(y1, y2, y3))
        dfp = [np.array([[-1.0, 0, 0], [1, 0, 0], [0, 0, 0]]),
               np.array([[0.0, 0, 0], [0, -2 * y2, 0], [0, 2 * y2, 0]]),
               np.array([[0.0, y3, y2], [0, -y3, -y2], [0, 0, 0]])]
        for j in range(3):
            s1, s2, s3 = S[:, j]
            dJS = np.array([[0.0, k3 * s3, k3 * s2], [0, -2 * k2 * s2 - k3 * s3, -k3 * s2], [0, 2 * k2 * s2, 0]])
            out[3 + 3 * j:6 + 3 * j, 0:3] = dJS + dfp[j]
        return out

    z0 = np.zeros(12)
    z0[0] = 1.0
    sol = solve_ivp(f, (0.0, t_out[-1]), z0, method="Radau", t_eval=list(t_out), rtol=1e-10, atol=1e-18,
                    jac=jac)
    assert sol.success
    return sol.y[:3].T, sol.y[3:].T.reshape(-1, 3, 3).transpose(0, 2, 1)


@pytest.mark.parametrize("method", ["auto", "radau_iia_5", "rosenbrock_4", "bdf"])
def test_robertson_rate_constant_sensitivities_match_scipy(method):
    model = json.loads((MODELS / "robertson.json").read_text())
    sm = prepare_sensitivities(model, ["k1", "k2", "k3"])
    t = np.array([0.4, 4.0, 40.0, 400.0, 4000.0])
    _, y, s = solve(sm, t, (0.0, 4000.0), method, rtol=1e-8, atol=1e-14)
    y_ref, s_ref = robertson_reference(tuple(t))
    np.testing.assert_allclose(y, y_ref, rtol=1e-5, atol=1e-12)
    # normalised sensitivities are O(1): compare them at the states' relative accuracy
    theta = np.array([0.04, 3e7, 1e4])
    with np.errstate(divide="ignore", invalid="ignore"):
        ref_norm = s_ref * theta[None, None, :] / y_ref[:, :, None]
    mask = np.isfinite(ref_norm)
    np.testing.assert_allclose(s.normalised[mask], ref_norm[mask], rtol=1e-4, atol=1e-6)


def test_sensitivities_respect_the_conservation_law():
    # y1 + y2 + y3 = 1 for every k (the model's conservation law), so the column sums of
    # dy/dk vanish at every time
    model = json.loads((MODELS / "robertson.json").read_text())
    sm = prepare_sensitivities(model, ["k1", "k2", "k3"])
    t = np.geomspace(1e-3, 1e5, 9)
    _, _, s = solve(sm, t, (0.0, 1e5), rtol=1e-7, atol=1e-12)
    scale = np.abs(s.raw).max(axis=1)
    assert np.all(np.abs(s.raw.sum(axis=1)) <= 1e-6 * scale + 1e-14)


def test_without_error_control_the_steps_are_the_states_alone():
    model = json.loads((MODELS / "robertson.json").read_text())
    sm = prepare_sensitivities(model, ["k1", "k2", "k3"])
    t = np.array([40.0])
    with_control, _, s_on = solve(sm, t, (0.0, 40.0), "radau_iia_5", rtol=1e-6, atol=1e-12)
    without, _, s_off = solve(sm, t, (0.0, 40.0), "radau_iia_5", rtol=1e-6, atol=1e-12, error_control=False)
    assert without.report["accepted_steps"] <= with_control.report["accepted_steps"]
    np.testing.assert_allclose(s_off.normalised, s_on.normalised, rtol=1e-2, atol=1e-4)


def test_machine_code_gives_the_interpreters_values():
    model = json.loads((MODELS / "robertson.json").read_text())
    sm = prepare_sensitivities(model, ["k1", "k3"], ["y1"])
    compiled, info = native.choose(sm.augmented, native.ALWAYS)
    if not info["used"]:
        pytest.skip(f"machine code unavailable here: {info['reason']}")
    t = np.array([1.0, 100.0])
    _, _, a = solve(sm, t, (0.0, 100.0), "radau_iia_5")
    _, _, b = solve(sm, t, (0.0, 100.0), "radau_iia_5", kernel=compiled.kernel)
    np.testing.assert_array_equal(a.raw, b.raw)


def test_unknown_and_repeated_names_are_issues_with_suggestions():
    with pytest.raises(ModelError) as e:
        prepare_sensitivities(DECAY, ["kk", "k", "k"], ["b"])
    issues = {i.path: i for i in e.value.issues}
    assert "unknown parameter 'kk'" in issues[("parameters", 0)].message
    assert "k" in issues[("parameters", 0)].suggestion
    assert "named twice" in issues[("parameters", 2)].message
    assert "unknown state 'b'" in issues[("initial", 0)].message
    with pytest.raises(ModelError, match="at least one"):
        prepare_sensitivities(DECAY, [], [])
