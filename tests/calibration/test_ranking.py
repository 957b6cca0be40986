"""Which steps matter (calibration.ranking): outputs' normalised sensitivities against closed
forms, from real runs of the engine's sensitivity equations.

Oracles:
- A -> B -> C, first order (k1, k2): B(t) = A0 k1 / (k2 - k1) (exp(-k1 t) - exp(-k2 t)),
  t_max = ln(k1/k2) / (k1 - k2) (any kinetics textbook, e.g. Atkins' Physical Chemistry,
  consecutive reactions). Derivatives of B(T), of B_max = B(t_max) and of the integral are
  taken symbolically with sympy from these closed forms.
- First-order decay a = a0 exp(-k t) crossing v: t* = ln(a0/v) / k, so d ln t*/d ln k = -1
  and d ln t*/d ln a0 = 1 / ln(a0/v) (calculus).
"""
from __future__ import annotations

import numpy as np
import pytest
import sympy as sp

from calibration.ranking import Output, rank, rate_constant_reactions
from engine.integrate import SolverOptions, integrate
from engine.sensitivities import prepare_sensitivities, split

K1, K2, A0, T_END = 0.8, 0.3, 2.0, 10.0
CHAIN = {"states": {"A": A0, "B": 0.0, "C": 0.0}, "parameters": {"k1": K1, "k2": K2},
         "reactions": [{"name": "A to B", "equation": "A -> B", "k": "k1"},
                       {"equation": "B -> C", "k": "k2"}]}
DECAY = {"states": {"a": 2.0}, "parameters": {"k": 0.5}, "ddt": {"a": "-k*a"}}


def run(model, parameters, initial=(), span=(0.0, T_END), count=201):
    sm = prepare_sensitivities(model, list(parameters), list(initial))
    p, y0 = sm.base.p, sm.base.y0
    t_out = np.linspace(*span, count)
    opts = SolverOptions(rtol=1e-10, atol=sm.atol(1e-13, p, y0), nonnegative=sm.nonnegative(sm.base.nonnegative))
    sol = integrate(sm.augmented.kernel, p, sm.initial_state(y0), span, t_out, opts)
    assert sol.outcome == "succeeded", sol.message
    theta = sm.values(p, y0)
    y, s = split(sm, sol.y, theta)
    return dict(model=model, state_names=sm.base.state_names, wrt=sm.wrt, theta=theta, p=p,
                t=sol.t, y=y, raw=s.raw)


def closed_form_chain():
    k1, k2, a0, t = sp.symbols("k1 k2 a0 t", positive=True)
    B = a0 * k1 / (k2 - k1) * (sp.exp(-k1 * t) - sp.exp(-k2 * t))
    return k1, k2, a0, t, B


def dlog(expr, var, values):
    """d ln expr / d ln var at values (sympy, exact derivative, evaluated in floats)."""
    return float((sp.diff(expr, var) * var / expr).subs(values).evalf(30))



def test_final_value_of_b_matches_the_closed_form():
    k1, k2, a0, t, B = closed_form_chain()
    vals = {k1: K1, k2: K2, a0: A0, t: T_END}
    [row] = rank(outputs=[{"state": "B", "summary": "final"}], **run(CHAIN, ["k1", "k2"], ["A"]))
    assert row["t"] == T_END
    assert row["value"] == pytest.approx(float(B.subs(vals)), rel=1e-8)
    got = {e["wrt"]: e for e in row["entries"]}
    assert got["k1"]["normalised"] == pytest.approx(dlog(B, k1, vals), rel=1e-6)
    assert got["k2"]["normalised"] == pytest.approx(dlog(B, k2, vals), rel=1e-6)
    assert got["init:A"]["normalised"] == pytest.approx(1.0, rel=1e-7)  # B is linear in A0
    assert got["k1"]["raw"] == pytest.approx(float(sp.diff(B, k1).subs(vals)), rel=1e-6)
    # reactions named beside their rate constants (default name R2 by position)
    assert got["k1"]["reactions"] == ["A to B"] and got["k2"]["reactions"] == ["R2"]
    assert got["init:A"]["reactions"] == []
    # sorted by |normalised|, signed
    norms = [abs(e["normalised"]) for e in row["entries"]]
    assert norms == sorted(norms, reverse=True)
    assert got["k2"]["normalised"] < 0 < got["k1"]["normalised"] or dlog(B, k1, vals) < 0


def test_maximum_of_b_matches_the_closed_form():
    k1, k2, a0, t, B = closed_form_chain()
    t_max = sp.log(k1 / k2) / (k1 - k2)
    B_max = sp.simplify(B.subs(t, t_max))
    vals = {k1: K1, k2: K2, a0: A0}
    [row] = rank(outputs=[{"state": "B", "summary": "max"}], **run(CHAIN, ["k1", "k2"]))
    # t_max lies between output times (spacing h = 0.05): values there are cubic Hermite
    # interpolants, error O(h^4) (test_interpolation_error_falls_as_h_to_the_fourth)
    assert row["t"] == pytest.approx(float(t_max.subs(vals)), rel=1e-7)
    assert row["value"] == pytest.approx(float(B_max.subs(vals)), rel=1e-8)
    got = {e["wrt"]: e["normalised"] for e in row["entries"]}
    # envelope: d B_max/dθ = s(t_max); B_max depends on k1/k2 only, so the two sum to 0
    assert got["k1"] == pytest.approx(dlog(B_max, k1, vals), rel=1e-5)
    assert got["k2"] == pytest.approx(dlog(B_max, k2, vals), rel=1e-5)
    assert got["k1"] + got["k2"] == pytest.approx(0.0, abs=1e-6)


def test_integral_and_at_a_time_of_b():
    k1, k2, a0, t, B = closed_form_chain()
    vals = {k1: K1, k2: K2, a0: A0}
    data = run(CHAIN, ["k1", "k2"])
    integral, at = rank(outputs=[{"state": "B", "summary": "integral"},
                                 {"state": "B", "summary": "at", "t": 3.1}], **data)
    # the trapezoid over the output times of the closed-form values and sensitivities
    tt = data["t"]
    Bf, dB1 = sp.lambdify(t, B.subs(vals)), sp.lambdify(t, sp.diff(B, k1).subs(vals))
    trap = lambda v: float(np.sum(0.5 * np.diff(tt) * (v[1:] + v[:-1])))  # noqa: E731
    value, d1 = trap(Bf(tt)), trap(dB1(tt))
    assert integral["value"] == pytest.approx(value, rel=1e-8)
    got = {e["wrt"]: e for e in integral["entries"]}
    assert got["k1"]["raw"] == pytest.approx(d1, rel=1e-6)
    assert got["k1"]["normalised"] == pytest.approx(d1 * K1 / value, rel=1e-6)
    # at t = 3.1, between output times 3.05 and 3.1 + ... (h = 0.05): Hermite interpolation with the model's slopes
    vals_t = {**vals, t: 3.1}
    assert at["t"] == 3.1 and at["value"] == pytest.approx(float(B.subs(vals_t)), rel=1e-6)
    got = {e["wrt"]: e["normalised"] for e in at["entries"]}
    assert got["k1"] == pytest.approx(dlog(B, k1, vals_t), rel=1e-5)
    assert got["k2"] == pytest.approx(dlog(B, k2, vals_t), rel=1e-5)


@pytest.mark.parametrize("v", [1.0, 0.37, 0.05])
def test_crossing_time_of_a_decay(v):
    # t* = ln(a0/v)/k: d ln t*/d ln k = -1, d ln t*/d ln a0 = 1/ln(a0/v)
    [row] = rank(outputs=[{"state": "a", "summary": "crossing", "value": v}],
                 **run(DECAY, ["k"], ["a"], span=(0.0, 8.0), count=161))
    assert "note" not in row
    assert row["value"] == pytest.approx(np.log(2.0 / v) / 0.5, rel=1e-8)
    got = {e["wrt"]: e["normalised"] for e in row["entries"]}
    assert got["k"] == pytest.approx(-1.0, rel=1e-6)
    assert got["init:a"] == pytest.approx(1.0 / np.log(2.0 / v), rel=1e-5)


def test_crossing_direction_and_no_crossing():
    data = run(CHAIN, ["k1", "k2"])
    rising, falling, never = rank(outputs=[
        {"state": "B", "summary": "crossing", "value": 0.5, "direction": "rising"},
        {"state": "B", "summary": "crossing", "value": 0.5, "direction": "falling"},
        {"state": "B", "summary": "crossing", "value": 5.0}], **data)
    assert 0 < rising["value"] < 2.5 < falling["value"]  # t_max = ln(k1/k2)/(k1-k2) = 1.96
    # both passages satisfy B(t*) = 0.5 in the closed form
    k1, k2, a0, t, B = closed_form_chain()
    for row in (rising, falling):
        assert float(B.subs({k1: K1, k2: K2, a0: A0, t: row["t"]})) == pytest.approx(0.5, rel=1e-7)
    # the rising delay shortens when k1 grows; the falling one too when k2 grows
    r = {e["wrt"]: e["normalised"] for e in rising["entries"]}
    f = {e["wrt"]: e["normalised"] for e in falling["entries"]}
    assert r["k1"] < 0 and f["k2"] < 0
    assert never["value"] is None and "does not pass 5" in never["note"]
    assert all(e["normalised"] is None for e in never["entries"])


def test_interpolation_error_falls_as_h_to_the_fourth():
    # the crossing time of the decay between output times, against t* = ln(a0/v)/k, for output
    # spacings h = 0.5 and 0.25, v chosen so that t* = 3 + h/2 lies mid-interval in both: cubic
    # Hermite interpolation with exact end slopes is O(h^4), so the error falls about 16x;
    # d ln t*/d ln k stays near -1 even at these coarse spacings
    errors = []
    for count, h in ((17, 0.5), (33, 0.25)):
        t_star = 3.0 + h / 2
        [row] = rank(outputs=[{"state": "a", "summary": "crossing", "value": 2.0 * np.exp(-0.5 * t_star)}],
                     **run(DECAY, ["k"], span=(0.0, 8.0), count=count))
        errors.append(abs(row["value"] - t_star))
        assert row["entries"][0]["normalised"] == pytest.approx(-1.0, rel=1e-4)
    assert 12 < errors[0] / errors[1] < 20 and errors[0] < 1e-4


def test_rate_constants_name_their_reactions():
    model = {"states": {"A": 1, "B": 0, "T": 300}, "parameters": {"kf": 1, "kr": 2, "A0": 3, "x": 1},
             "reactions": [{"equation": "A <=> B", "k": "kf", "k_reverse": " kr "},
                           {"name": "hot", "equation": "B -> A", "arrhenius": {"A": "A0", "Ea": 10, "T": "T"}},
                           {"equation": "A -> ", "k": "2*x"}, {"name": "again", "equation": "B -> ", "k": "kf"}]}
    assert rate_constant_reactions(model) == {"kf": ["R1", "again"], "kr": ["R1 (reverse)"], "A0": ["hot"]}


def test_output_labels():
    assert Output("B", "at", t=2.0).label() == "B at t=2"
    assert Output("B", "crossing", value=0.5, direction="rising").label() == "crossing B=0.5 rising"
    assert Output("B", "final").label() == "final B"


def test_the_job_schema_offers_the_summaries_computed_here():
    from calibration import ranking
    from schemas import job

    assert job.RANK_SUMMARIES == ranking.SUMMARIES and job.RANK_DIRECTIONS == ranking.DIRECTIONS
    assert job.MAX_RANK_OUTPUTS == ranking.MAX_OUTPUTS
