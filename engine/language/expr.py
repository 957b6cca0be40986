"""Expression trees of the model language.

The parser (``engine.language.parser``) builds these trees from text.

Trees are immutable :class:`Node` objects made by a :class:`Builder`, which
folds constants in float64, applies local simplifications and hash-conses
(interns) nodes, so equal subexpressions are one object: compiled programs
and derivatives then share work without a separate CSE pass. Nodes from one
builder are compared by identity.
"""
from __future__ import annotations

import math

from engine.language.limits import DEFAULT_LIMITS
from engine.language.names import TIME

COMMUTATIVE = frozenset({"add", "mul", "min", "max", "eq", "ne", "and", "or"})
LEAVES = frozenset({"const", "y", "p", "t"})


class ExprError(ValueError):
    """A problem in one expression: what is wrong, where (0-based), and a hint."""

    def __init__(self, message: str, position: int | None = None, suggestion: str | None = None):
        super().__init__(message)
        self.message, self.position, self.suggestion = message, position, suggestion


class Node:
    """One immutable tree node. ``value`` is the constant, the variable index
    (``y``/``p``) or the integer exponent (``powi``); ``name`` labels variables."""

    __slots__ = ("op", "args", "value", "name", "serial")

    def __init__(self, op, args, value, name, serial):
        setattr_ = object.__setattr__
        setattr_(self, "op", op)
        setattr_(self, "args", args)
        setattr_(self, "value", value)
        setattr_(self, "name", name)
        setattr_(self, "serial", serial)

    def __setattr__(self, key, value):
        raise AttributeError("Node is immutable")

    def __repr__(self):
        return f"Node({to_text(self)})"

    @property
    def is_const(self) -> bool:
        return self.op == "const"


def _log(x):
    return math.log(x) if x > 0 else (-math.inf if x == 0 else math.nan)


def _pow(x, e):
    if x < 0 and e != math.floor(e):
        return math.nan
    if x == 0 and e < 0:
        return math.inf
    return x ** e


def _div(a, b):
    if b == 0:
        return math.nan if a == 0 else math.copysign(math.inf, a) * math.copysign(1, b)
    return a / b


_CLAMPED = frozenset({"exp", "sinh", "cosh"})
_EXP_ARG_MAX = 709.78  # exp(709.78) is about 1.8e308, the largest float64


def _clip(x):
    return min(max(x, -709.0), 709.0)


# Scalar semantics of every operator; identical to engine.kernels.vm.run.
UNARY = {
    "neg": lambda x: -x, "exp": lambda x: math.exp(min(x, 709.0)), "log": _log,
    "log10": lambda x: math.log10(x) if x > 0 else (-math.inf if x == 0 else math.nan),
    "sqrt": lambda x: math.sqrt(x) if x >= 0 else math.nan,
    "sin": math.sin, "cos": math.cos, "tan": math.tan,
    "sinh": lambda x: math.sinh(_clip(x)), "cosh": lambda x: math.cosh(_clip(x)),
    "tanh": math.tanh, "abs": abs, "sign": lambda x: float((x > 0) - (x < 0)),
    "step": lambda x: 1.0 if x >= 0 else 0.0, "not": lambda x: 1.0 if x == 0 else 0.0,
}
BINARY = {
    "add": lambda a, b: a + b, "sub": lambda a, b: a - b, "mul": lambda a, b: a * b,
    "div": _div, "pow": _pow, "min": min, "max": max,
    "lt": lambda a, b: float(a < b), "le": lambda a, b: float(a <= b),
    "gt": lambda a, b: float(a > b), "ge": lambda a, b: float(a >= b),
    "eq": lambda a, b: float(a == b), "ne": lambda a, b: float(a != b),
    "and": lambda a, b: float(a != 0 and b != 0), "or": lambda a, b: float(a != 0 or b != 0),
}


def powi(x: float, n: int) -> float:
    """x**n by repeated squaring, exactly as engine.kernels.vm computes it."""
    if n < 0:
        x, n = _div(1.0, x), -n
    r = 1.0
    while n:
        if n & 1:
            r *= x
        x *= x
        n >>= 1
    return r


class Builder:
    """Makes interned, simplified nodes. ``strict`` makes a constant that folds
    to a non-finite number an error (user expressions); otherwise it stays unfolded."""

    def __init__(self, strict: bool = True, max_exponent: float = DEFAULT_LIMITS.max_exponent):
        self._table: dict = {}
        self.strict = strict
        self.max_exponent = max_exponent
        self.zero, self.one = self.const(0.0), self.const(1.0)

    def __len__(self):
        return len(self._table)

    def _make(self, op, args=(), value=None, name=None):
        key = (op, value, tuple(a.serial for a in args))
        node = self._table.get(key)
        if node is None:
            node = Node(op, tuple(args), value, name, len(self._table))
            self._table[key] = node
        return node

    def const(self, v: float) -> Node:
        v = float(v)
        if not math.isfinite(v):
            raise ExprError("number is not finite in float64")
        return self._make("const", value=v + 0.0)  # folds -0.0 into 0.0

    def var(self, kind: str, index: int, name: str) -> Node:
        return self._make(kind, value=int(index), name=name)

    def time(self) -> Node:
        return self._make("t", name=TIME)

    def _fold(self, fn, *vals):
        try:
            r = float(fn(*vals))
        except (OverflowError, ValueError, ZeroDivisionError):
            r = math.nan
        if math.isfinite(r):
            return self.const(r)
        if self.strict:
            raise ExprError("constant sub-expression does not evaluate to a finite float64 number")
        return None

    def unary(self, op: str, x: Node) -> Node:
        if x.is_const and self.strict and op in _CLAMPED and abs(x.value) > _EXP_ARG_MAX \
                and (op != "exp" or x.value > 0):
            # evaluation clamps the argument (so a state that grows stays finite), but a
            # constant the user wrote that overflows is an error, not a clamped number
            raise ExprError(f"{op}({x.value:g}) overflows float64 (arguments up to about "
                            f"{_EXP_ARG_MAX:g} are representable)")
        if x.is_const:
            folded = self._fold(UNARY[op], x.value)
            if folded is not None:
                return folded
        if op == "neg":
            if x.op == "neg":
                return x.args[0]
            if x.op == "sub":
                return self.binary("sub", x.args[1], x.args[0])
        if op == "abs" and x.op in ("abs", "exp", "cosh"):
            return x
        return self._make(op, (x,))

    def binary(self, op: str, a: Node, b: Node) -> Node:
        if op == "pow" and b.is_const and abs(b.value) > self.max_exponent:
            raise ExprError(f"constant exponent {b.value:g} exceeds the limit {self.max_exponent:g}")
        if a.is_const and b.is_const:
            folded = self._fold(BINARY[op], a.value, b.value)
            if folded is not None:
                return folded
        if op in COMMUTATIVE and _order(b) < _order(a):
            a, b = b, a
        simple = getattr(self, "_simplify_" + op, None)
        if simple is not None:
            r = simple(a, b)
            if r is not None:
                return r
        return self._make(op, (a, b))

    def _simplify_add(self, a, b):
        if a is self.zero:
            return b
        if b.op == "neg":
            return self.binary("sub", a, b.args[0])
        if a.op == "neg":
            return self.binary("sub", b, a.args[0])
        return None

    def _simplify_sub(self, a, b):
        if b is self.zero:
            return a
        if a is self.zero:
            return self.unary("neg", b)
        if a is b:
            return self.zero
        if b.op == "neg":
            return self.binary("add", a, b.args[0])
        return None

    def _simplify_mul(self, a, b):
        if a.is_const:
            if a.value == 0.0:
                return self.zero
            if a.value == 1.0:
                return b
            if a.value == -1.0:
                return self.unary("neg", b)
            if b.op == "mul" and b.args[0].is_const:
                return self.binary("mul", self.const(a.value * b.args[0].value), b.args[1])
            if b.op == "neg":
                return self.binary("mul", self.const(-a.value), b.args[0])
        if a.op == "neg" and b.op == "neg":
            return self.binary("mul", a.args[0], b.args[0])
        if a is b:
            return self.powi(a, 2)
        return None

    def _simplify_div(self, a, b):
        if a is self.zero:
            return self.zero
        if b is self.one:
            return a
        if a is b:
            return self.one
        return None

    def _simplify_pow(self, a, b):
        if b.is_const:
            e = b.value
            if abs(e) > self.max_exponent:
                raise ExprError(f"constant exponent {e:g} exceeds the limit {self.max_exponent:g}")
            if e == math.floor(e):
                return self.powi(a, int(e))
        return None

    def powi(self, x: Node, n: int) -> Node:
        if n == 0:
            return self.one
        if n == 1:
            return x
        if x.is_const:
            folded = self._fold(powi, x.value, n)
            if folded is not None:
                return folded
        if x.op == "powi" and abs(x.value * n) <= self.max_exponent:
            return self.powi(x.args[0], x.value * n)
        return self._make("powi", (x,), value=int(n))

    def select(self, c: Node, a: Node, b: Node) -> Node:
        if c.is_const:
            return a if c.value != 0 else b
        if a is b:
            return a
        return self._make("select", (c, a, b))

    # Short names used by the derivative code.
    def add(self, a, b): return self.binary("add", a, b)
    def sub(self, a, b): return self.binary("sub", a, b)
    def mul(self, a, b): return self.binary("mul", a, b)
    def div(self, a, b): return self.binary("div", a, b)
    def neg(self, a): return self.unary("neg", a)


def _order(node: Node):
    return (not node.is_const, node.serial)


def postorder(roots) -> list[Node]:
    """Every node reachable from ``roots``, children before parents, each once (iterative)."""
    seen: set[int] = set()
    order: list[Node] = []
    for root in roots:
        if id(root) in seen:
            continue
        stack = [(root, 0)]
        while stack:
            node, i = stack.pop()
            if i < len(node.args):
                stack.append((node, i + 1))
                child = node.args[i]
                if id(child) not in seen:
                    stack.append((child, 0))
            elif id(node) not in seen:
                seen.add(id(node))
                order.append(node)
    return order


def evaluate(roots, t: float, y, p) -> list[float]:
    """Values of ``roots`` in plain Python float64 (reference semantics, for tests and tools)."""
    val: dict[int, float] = {}
    for n in postorder(roots):
        a = [val[id(c)] for c in n.args]
        if n.op == "const":
            v = n.value
        elif n.op == "y":
            v = float(y[n.value])
        elif n.op == "p":
            v = float(p[n.value])
        elif n.op == "t":
            v = float(t)
        elif n.op == "powi":
            v = powi(a[0], n.value)
        elif n.op == "select":
            v = a[1] if a[0] != 0 else a[2]
        elif n.op in UNARY:
            v = UNARY[n.op](a[0])
        else:
            try:
                v = BINARY[n.op](a[0], a[1])
            except OverflowError:
                v = math.inf
        val[id(n)] = v
    return [val[id(r)] for r in roots]


_INFIX = {"add": "+", "sub": "-", "mul": "*", "div": "/", "pow": "^", "lt": "<", "le": "<=",
          "gt": ">", "ge": ">=", "eq": "==", "ne": "!=", "and": " and ", "or": " or "}


def to_text(node: Node) -> str:
    """Readable, fully parenthesised form (for labels and debugging)."""
    text: dict[int, str] = {}
    for n in postorder([node]):
        a = [text[id(c)] for c in n.args]
        if n.op == "const":
            s = repr(n.value) if n.value >= 0 else f"({n.value!r})"
        elif n.op in ("y", "p", "t"):
            s = n.name
        elif n.op == "neg":
            s = f"(-{a[0]})"
        elif n.op == "powi":
            s = f"{a[0]}^{n.value}" if n.value > 0 else f"{a[0]}^({n.value})"
        elif n.op in _INFIX:
            s = f"({a[0]}{_INFIX[n.op]}{a[1]})"
        else:
            s = f"{'if' if n.op == 'select' else n.op}({', '.join(a)})"
        text[id(n)] = s
    return text[id(node)]
