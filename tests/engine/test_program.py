"""Register programs compute exactly what the trees say, with few registers."""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from engine.kernels import vm
from engine.language.expr import Builder, evaluate
from engine.language.parser import parse
from engine.language.limits import Limits
from engine.kernels.program import ConstPool, compile_program


def build(texts, limits=Limits()):
    b = Builder()
    scope = {n: b.var("y", i, n) for i, n in enumerate(("x", "y", "z"))}
    scope.update({n: b.var("p", i, n) for i, n in enumerate(("a", "c"))})
    roots = [parse(t, scope, b, limits) for t in texts]
    return b, roots


def run(roots, t, y, p):
    pool = ConstPool()
    code, n_regs = compile_program(list(enumerate(roots)), pool)
    out = np.full(len(roots), np.nan)
    vm.run(code, pool.array(), t, np.array(y, float), np.array(p, float), np.zeros(n_regs), out)
    return out, code, n_regs, pool


EXPRESSIONS = [
    "x + y*z", "a*x - c*y^2 + 3", "exp(-a/x) * x^2.5", "log(x) + log10(y) + sqrt(z)",
    "sin(x)*cos(y) + tan(z)", "sinh(x) - cosh(y) + tanh(z)", "abs(x - y) + sign(y - x)",
    "min(x, y, z) + max(a, c)", "if(x < y and not (z > 1), x, y) + step(t - 1)",
    "(x <= y) + (x >= y) + (x == x) + (x != y) + (x > y or y > x)", "x^-3 + y^7 + x/y",
    "t*a", "2.5", "x^y",
]


@pytest.mark.parametrize("text", EXPRESSIONS)
def test_program_matches_reference_evaluation(text):
    _, roots = build([text])
    point = (1.25, [0.7, 1.9, 0.4], [1.5, -0.5])
    out, *_ = run(roots, *point)
    assert out[0] == evaluate(roots, *point)[0]


def test_many_outputs_share_work_and_constants():
    _, roots = build(["exp(a*x) + 2.5", "exp(a*x) * 2.5", "2.5 * y"])
    out, code, _, pool = run(roots, 0.0, [1.0, 2.0, 0.0], [0.5, 0.0])
    assert list(out) == evaluate(roots, 0.0, [1.0, 2.0, 0.0], [0.5, 0.0])
    assert sum(row[0] == vm.EXP for row in code) == 1
    assert len(pool.array()) == 1


def test_registers_are_reused_after_last_use():
    limits = Limits(max_expression_length=100_000, max_expression_nodes=100_000)
    text = " + ".join(f"{k}*x*y + exp(z/{k})" for k in range(1, 400))
    _, roots = build([text], limits)
    out, code, n_regs, _ = run(roots, 0.0, [0.5, 0.25, 0.1], [0.0, 0.0])
    assert out[0] == pytest.approx(evaluate(roots, 0.0, [0.5, 0.25, 0.1], [0.0, 0.0])[0], rel=1e-14)
    assert n_regs - vm.prologue_registers(code) <= 8  # working registers
    assert len(code) > 1000


def test_single_use_products_are_fused_into_sums():
    _, roots = build(["a*x + c*y"])
    _, code, _, _ = run(roots, 0.0, [1.0, 2.0, 0.0], [3.0, 4.0])
    assert {vm.MULADD, vm.MULADDC, vm.MULADDP} & set(code[:, 0].tolist())


@settings(max_examples=150, deadline=None)
@given(st.lists(st.sampled_from(EXPRESSIONS), min_size=1, max_size=6),
       st.lists(st.floats(-3, 3), min_size=3, max_size=3))
def test_any_output_list_matches_reference(texts, y):
    _, roots = build(texts)
    out, *_ = run(roots, 0.5, y, [1.5, -0.5])
    ref = evaluate(roots, 0.5, y, [1.5, -0.5])
    np.testing.assert_array_equal(out, np.array(ref))


def test_single_use_loads_are_folded_into_their_reader():
    # a constant or parameter read once by a product, a fused multiply-add or an
    # output costs no separate load instruction; a shared one is still loaded once
    _, roots = build(["2.5*x + a*y", "a*z", "7.0"])
    out, code, _, _ = run(roots, 0.0, [1.0, 2.0, 3.0], [0.5, 0.0])
    assert list(out) == evaluate(roots, 0.0, [1.0, 2.0, 3.0], [0.5, 0.0])
    ops = code[:, 0].tolist()
    assert vm.OUTC in ops and ops.count(vm.CONST) == 0
    # a is read twice: not folded, copied once by the prologue (y[:3], p[:1], no consts)
    assert ops.count(vm.PARAM) == 0 and tuple(code[0]) == (vm.PROLOGUE, 3, 1, 0, 0)


def test_states_parameters_and_time_are_read_without_load_instructions():
    # the prologue copies y, p, t and the shared constants into registers in one pass;
    # the instructions then read them directly
    _, roots = build(["x*x + x*a + a/x + t*x + 2.5*(x - 2.5)", "y - 2.5"])
    out, code, n_regs, pool = run(roots, 0.75, [1.5, 2.0, 3.0], [0.5, 0.0])
    assert list(out) == evaluate(roots, 0.75, [1.5, 2.0, 3.0], [0.5, 0.0])
    ops = code[:, 0].tolist()
    assert ops[0] == vm.PROLOGUE and ops.count(vm.PROLOGUE) == 1
    assert not {vm.STATE, vm.PARAM, vm.CONST, vm.TIME} & set(ops)
    assert vm.reads_time(code) and vm.prologue_registers(code) == 2 + 1 + 1 + len(pool.array())


def test_a_program_without_loads_has_no_prologue():
    _, roots = build(["7.0", "2.5"])
    out, code, _, _ = run(roots, 0.0, [1.0, 2.0, 3.0], [0.5, 0.0])
    assert list(out) == [7.0, 2.5]
    assert vm.PROLOGUE not in code[:, 0].tolist() and not vm.reads_time(code)
