"""Exact symbolic derivatives of expression trees.

Forward accumulation over the shared tree: every node gets its sparse
gradient (variable index -> derivative node), built from its children's
gradients with the chain rule, once per node. Because the
:class:`engine.language.expr.Builder` interns and simplifies, derivative terms share
subexpressions with the right-hand side and with each other, and structural
zeros vanish, which gives the sparsity pattern directly.

Non-smooth functions differentiate piecewise: ``d|x| = sign(x) dx``,
``d min(a, b) = if(a <= b, da, db)``, ``d if(c, a, b) = if(c, da, db)``;
``step``, ``sign`` and comparisons have derivative zero.
"""
from __future__ import annotations

import math

from engine.language.expr import Builder, Node, postorder

_ZERO_DERIVATIVE = frozenset({"const", "t", "sign", "step", "not", "lt", "le", "gt", "ge",
                              "eq", "ne", "and", "or"})


def _contribution(b: Builder, n: Node, i: int, g: Node) -> Node:
    """d(n)/d(args[i]) * g, written to keep the tree small."""
    x = n.args[0]
    op = n.op
    if op == "add":
        return g
    if op == "sub":
        return g if i == 0 else b.neg(g)
    if op == "neg":
        return b.neg(g)
    if op == "mul":
        return b.mul(n.args[1 - i], g)
    if op == "div":
        if i == 0:
            return b.div(g, n.args[1])
        return b.neg(b.div(b.mul(n, g), n.args[1]))
    if op == "powi":
        k = n.value
        return b.mul(b.mul(b.const(k), b.powi(x, k - 1)), g)
    if op == "pow":
        if i == 0:
            e = n.args[1]
            return b.mul(b.mul(e, b.binary("pow", x, b.sub(e, b.one))), g)
        return b.mul(b.mul(n, b.unary("log", x)), g)
    if op == "exp":
        return b.mul(n, g)
    if op == "log":
        return b.div(g, x)
    if op == "log10":
        return b.div(g, b.mul(b.const(math.log(10.0)), x))
    if op == "sqrt":
        return b.div(b.mul(b.const(0.5), g), n)
    if op == "sin":
        return b.mul(b.unary("cos", x), g)
    if op == "cos":
        return b.neg(b.mul(b.unary("sin", x), g))
    if op == "tan":
        return b.mul(b.add(b.one, b.powi(n, 2)), g)
    if op == "sinh":
        return b.mul(b.unary("cosh", x), g)
    if op == "cosh":
        return b.mul(b.unary("sinh", x), g)
    if op == "tanh":
        return b.mul(b.sub(b.one, b.powi(n, 2)), g)
    if op == "abs":
        return b.mul(b.unary("sign", x), g)
    raise ValueError(f"no derivative rule for {op!r}")


def _piecewise(b: Builder, cond: Node, ga: dict, gb: dict) -> dict:
    out = {}
    for v in ga.keys() | gb.keys():
        d = b.select(cond, ga.get(v, b.zero), gb.get(v, b.zero))
        if d is not b.zero:
            out[v] = d
    return out


def gradients(b: Builder, roots: list[Node], kind: str = "y") -> list[dict[int, Node]]:
    """Sparse gradient of each root with respect to variables of ``kind`` ('y' or 'p')."""
    grad: dict[int, dict[int, Node]] = {}
    empty: dict[int, Node] = {}
    for n in postorder(roots):
        op = n.op
        if op == kind:
            grad[id(n)] = {n.value: b.one}
            continue
        if op in _ZERO_DERIVATIVE or op in ("y", "p"):
            grad[id(n)] = empty
            continue
        if op == "select":
            grad[id(n)] = _piecewise(b, n.args[0], grad[id(n.args[1])], grad[id(n.args[2])])
            continue
        if op in ("min", "max"):
            a, c = n.args
            cond = b.binary("le" if op == "min" else "ge", a, c)
            grad[id(n)] = _piecewise(b, cond, grad[id(a)], grad[id(c)])
            continue
        acc: dict[int, Node] = {}
        for i, child in enumerate(n.args):
            for v, g in grad[id(child)].items():
                term = _contribution(b, n, i, g)
                acc[v] = b.add(acc[v], term) if v in acc else term
        grad[id(n)] = {v: d for v, d in acc.items() if d is not b.zero} if acc else empty
    return [grad[id(r)] for r in roots]


def jacobian(b: Builder, rhs: list[Node], kind: str = "y") -> list[tuple[int, int, Node]]:
    """Nonzero entries (row, column, derivative node) of d(rhs)/d(kind), row-major sorted."""
    entries = []
    for row, g in enumerate(gradients(b, rhs, kind)):
        for col in sorted(g):
            entries.append((row, col, g[col]))
    return entries
