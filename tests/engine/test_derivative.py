"""Symbolic derivatives agree with central differences and with the complex step."""
from __future__ import annotations

import cmath

import numpy as np
import pytest
from hypothesis import assume, given, settings, strategies as st

from engine.language.derivative import gradients, jacobian
from engine.language.expr import Builder, ExprError, evaluate, postorder
from engine.language.parser import parse

NAMES = ("x", "y", "z")


def setup(texts):
    b = Builder()
    scope = {n: b.var("y", i, n) for i, n in enumerate(NAMES)}
    scope["a"] = b.var("p", 0, "a")
    roots = [parse(t, scope, b) for t in texts]
    b.strict = False
    return b, roots


def central_difference(roots, x, p, h=1e-6):
    J = np.zeros((len(roots), len(x)))
    for j in range(len(x)):
        xp, xm = np.array(x, float), np.array(x, float)
        xp[j] += h
        xm[j] -= h
        J[:, j] = (np.array(evaluate(roots, 0.0, xp, p)) - np.array(evaluate(roots, 0.0, xm, p))) / (2 * h)
    return J


_CFUN = {"exp": cmath.exp, "log": cmath.log, "log10": cmath.log10, "sqrt": cmath.sqrt, "sin": cmath.sin,
         "cos": cmath.cos, "tan": cmath.tan, "sinh": cmath.sinh, "cosh": cmath.cosh,
         "tanh": cmath.tanh, "neg": lambda v: -v}


def complex_step(root, x, p, j, h=1e-30):
    """Independent oracle: d root / d x_j = Im f(x + i h e_j) / h (smooth functions only)."""
    val = {}
    for n in postorder([root]):
        a = [val[id(c)] for c in n.args]
        if n.op == "const":
            v = complex(n.value)
        elif n.op == "y":
            v = complex(x[n.value], h if n.value == j else 0.0)
        elif n.op == "p":
            v = complex(p[n.value])
        elif n.op == "powi":
            v = a[0] ** n.value
        elif n.op in _CFUN:
            v = _CFUN[n.op](a[0])
        else:
            v = {"add": lambda u, w: u + w, "sub": lambda u, w: u - w, "mul": lambda u, w: u * w,
                 "div": lambda u, w: u / w, "pow": lambda u, w: cmath.exp(w * cmath.log(u))}[n.op](*a)
        val[id(n)] = v
    return val[id(root)].imag / h


SMOOTH = [
    "x*y*z + a*x^3", "exp(-a/x) * y^2", "log(x) + sqrt(y) / z", "x^y", "x^2.5 + z^-2",
    "sin(x*y) + cos(z) + tan(x/4)", "sinh(x) * cosh(y) - tanh(z)", "(x + y) / (x - 3*z)",
    "a*x*exp(-y/x) + log10(z)", "1 / (1 + x^2)^1.5",
]


@pytest.mark.parametrize("text", SMOOTH)
def test_smooth_derivatives_match_complex_step_and_differences(text):
    b, (root,) = setup([text])
    x, p = [0.7, 1.3, 0.4], [2.0]
    (grad,) = gradients(b, [root])
    exact = [evaluate([grad[j]], 0.0, x, p)[0] if j in grad else 0.0 for j in range(3)]
    oracle = [complex_step(root, x, p, j) for j in range(3)]
    np.testing.assert_allclose(exact, oracle, rtol=1e-13, atol=1e-14)
    np.testing.assert_allclose(exact, central_difference([root], x, p)[0], rtol=1e-6, atol=1e-7)


@pytest.mark.parametrize("text, point, expected", [
    ("abs(x - y)", [1.0, 2.0, 0.0], [-1.0, 1.0, 0.0]),
    ("min(x, 2*y)", [1.0, 2.0, 0.0], [1.0, 0.0, 0.0]),
    ("min(x, 2*y)", [5.0, 2.0, 0.0], [0.0, 2.0, 0.0]),
    ("max(x, y, z)", [1.0, 2.0, 3.0], [0.0, 0.0, 1.0]),
    ("if(x > y, x*y, z^2)", [3.0, 2.0, 1.0], [2.0, 3.0, 0.0]),
    ("if(x > y, x*y, z^2)", [1.0, 2.0, 1.5], [0.0, 0.0, 3.0]),
    ("step(x - 1) * y", [2.0, 3.0, 0.0], [0.0, 1.0, 0.0]),
    ("sign(x) + (x > y) + (not z)", [2.0, 3.0, 0.0], [0.0, 0.0, 0.0]),
])
def test_piecewise_functions_differentiate_branch_by_branch(text, point, expected):
    b, (root,) = setup([text])
    (grad,) = gradients(b, [root])
    got = [evaluate([grad[j]], 0.0, point, [1.0])[0] if j in grad else 0.0 for j in range(3)]
    assert got == expected


def test_jacobian_pattern_is_structural_and_row_major():
    b, roots = setup(["x*y", "3*z", "a + 1"])
    pattern = [(r, c) for r, c, _ in jacobian(b, roots)]
    assert pattern == [(0, 0), (0, 1), (1, 2)]


def test_parameter_jacobian():
    b, roots = setup(["a*x^2", "y"])
    entries = jacobian(b, roots, kind="p")
    assert [(r, c) for r, c, _ in entries] == [(0, 0)]
    assert evaluate([entries[0][2]], 0.0, [3.0, 0, 0], [2.0])[0] == 9.0


def test_derivatives_share_subexpressions_with_the_function():
    b, (root,) = setup(["exp(a*x*y)"])
    (grad,) = gradients(b, [root])
    # d/dx exp(u) = exp(u) * du/dx: the exp node itself is reused, not rebuilt
    assert any(node is root for node in postorder([grad[0]]))


LEAF = st.sampled_from(["x", "y", "z", "a", "0.5", "2", "3"])


def _expr(depth):
    if depth == 0:
        return LEAF
    sub = _expr(depth - 1)
    return st.one_of(
        LEAF,
        st.tuples(sub, st.sampled_from(["+", "-", "*"]), sub).map(lambda t: f"({t[0]} {t[1]} {t[2]})"),
        st.tuples(sub, sub).map(lambda t: f"({t[0]})/(2 + ({t[1]})^2)"),
        st.tuples(st.sampled_from(["exp", "sin", "cos", "tanh"]), sub).map(lambda t: f"{t[0]}(({t[1]})/4)"),
        sub.map(lambda s: f"({s})^3"),
    )


@settings(max_examples=150, deadline=None)
@given(_expr(4))
def test_generated_expressions_match_complex_step(text):
    try:
        b, (root,) = setup([text])
    except ExprError as err:
        # nested cubes of constants leave double range when folded at parse time; the
        # parser rejects those (a specified error): no derivative to check there
        assume("finite float64" not in err.message)
        raise
    x, p = [0.3, -0.2, 0.9], [1.1]
    (grad,) = gradients(b, [root])
    for j in range(3):
        try:
            oracle = complex_step(root, x, p, j)
        except OverflowError:  # nested cubes of exponentials leave double range: no oracle there
            assume(False)
        exact = evaluate([grad[j]], 0.0, x, p)[0] if j in grad else 0.0
        assert exact == pytest.approx(oracle, rel=1e-11, abs=1e-11)
