"""Parser of the model's expression language: our own tokenizer and recursive descent.

No ``eval`` and no ``ast``: the text is checked first (type, length, printable ASCII,
parenthesis depth), then tokenized with literal-size checks, then parsed with a
nesting-depth and node-count budget. Every problem becomes an
:class:`engine.language.expr.ExprError` with the 0-based character position. The tree is built
by an :class:`engine.language.expr.Builder`, which folds constants and shares subexpressions.
"""
from __future__ import annotations

import re

from engine.language.expr import Builder, ExprError, Node
from engine.language.limits import DEFAULT_LIMITS, Limits
from engine.language.names import CONSTANTS, FUNCTIONS, TIME, suggest

# Parser: tokenizer + recursive descent. Precedence, lowest first:
#   or < and < not < comparison < + - < * / < unary - + < ^ ** (right-assoc)

_TOKEN = re.compile(
    r" *(?:(?P<num>(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][+-]?[0-9]+)?)"
    r"|(?P<name>[A-Za-z_][A-Za-z0-9_]*)"
    r"|(?P<op>\*\*|<=|>=|==|!=|[-+*/^(),<>]))")
_COMPARE = {"<": "lt", "<=": "le", ">": "gt", ">=": "ge", "==": "eq", "!=": "ne"}
_UNARY_FUNCS = {"exp", "log", "log10", "sqrt", "sin", "cos", "tan", "sinh", "cosh", "tanh",
                "abs", "sign", "step"}
_FORBIDDEN_CHARS = {
    ".": "attribute access is not allowed", "[": "subscripts are not allowed",
    "'": "strings are not allowed", '"': "strings are not allowed",
    "=": "use == to compare", "#": "'#' is not allowed", ":": "':' is not allowed",
}


def precheck(text: object, limits: Limits = DEFAULT_LIMITS) -> None:
    """Cheap checks done before tokenizing: type, length, printable ASCII, paren depth."""
    if not isinstance(text, str):
        raise ExprError("an expression must be a string")
    if not text.strip():
        raise ExprError("the expression is empty", 0)
    if len(text) > limits.max_expression_length:
        raise ExprError(f"the expression is longer than {limits.max_expression_length} characters",
                        limits.max_expression_length)
    opened: list[int] = []  # positions of the '(' not yet closed
    for i, ch in enumerate(text):
        if not (" " <= ch <= "~"):
            raise ExprError(f"character {ch!r} is not allowed; use printable ASCII only", i)
        if ch == "(":
            opened.append(i)
            if len(opened) > limits.max_nesting_depth:
                raise ExprError(f"parentheses nest deeper than {limits.max_nesting_depth}", i)
        elif ch == ")":
            if not opened:
                raise ExprError("unmatched ')'", i)
            opened.pop()
    if opened:
        raise ExprError("unclosed '('", opened[-1])


def _tokenize(text: str, limits: Limits) -> list[tuple[str, str, int]]:
    tokens, pos = [], 0
    while pos < len(text):
        m = _TOKEN.match(text, pos)
        if m is None or m.end() == pos:
            i = len(text) - len(text[pos:].lstrip(" "))
            if i >= len(text):
                break
            ch = text[i]
            raise ExprError(f"unexpected {ch!r}; {_FORBIDDEN_CHARS.get(ch, 'not part of the language')}", i)
        kind = m.lastgroup
        tok_pos = m.start(kind)
        value = m.group(kind)
        if kind == "num":
            mantissa = re.split("[eE]", value)[0]
            if sum(c.isdigit() for c in mantissa) > limits.max_literal_digits:
                raise ExprError(f"number has more than {limits.max_literal_digits} digits", tok_pos)
            if len(value) - len(mantissa) > 5:
                raise ExprError("number exponent is too long", tok_pos)
        tokens.append((kind, value, tok_pos))
        pos = m.end()
    tokens.append(("end", "", len(text)))
    return tokens


class _Parser:
    def __init__(self, text, scope, builder, limits, explain):
        self.tokens = _tokenize(text, limits)
        self.i, self.depth, self.nodes = 0, 0, 0
        self.scope, self.b, self.limits, self.explain = scope, builder, limits, explain or {}

    # -- helpers ----------------------------------------------------------
    def peek(self):
        return self.tokens[self.i]

    def take(self):
        tok = self.tokens[self.i]
        self.i += 1
        return tok

    def expect(self, value):
        kind, v, pos = self.take()
        if v != value or kind == "end":
            found = "the end" if kind == "end" else repr(v)
            raise ExprError(f"expected {value!r} but found {found}", pos)

    def count(self, pos):
        self.nodes += 1
        if self.nodes > self.limits.max_expression_nodes:
            raise ExprError(f"expression has more than {self.limits.max_expression_nodes} terms", pos)

    def enter(self, pos):
        self.depth += 1
        if self.depth > self.limits.max_nesting_depth:
            raise ExprError(f"expression nests deeper than {self.limits.max_nesting_depth}", pos)

    def build(self, pos, fn, *args):
        self.count(pos)
        try:
            return fn(*args)
        except ExprError as err:
            raise ExprError(err.message, pos, err.suggestion) from None

    # -- grammar ----------------------------------------------------------
    def parse(self):
        node = self.p_or()
        kind, v, pos = self.peek()
        if kind != "end":
            raise ExprError(f"unexpected {v!r}; expected an operator or the end", pos)
        return node

    def _left_assoc(self, sub, ops):
        node = sub()
        while self.peek()[1] in ops and self.peek()[0] in ("op", "name"):
            _, v, pos = self.take()
            node = self.build(pos, self.b.binary, ops[v], node, sub())
        return node

    def p_or(self):
        return self._left_assoc(self.p_and, {"or": "or"})

    def p_and(self):
        return self._left_assoc(self.p_not, {"and": "and"})

    def p_not(self):
        kind, v, pos = self.peek()
        if kind == "name" and v == "not":
            self.take()
            self.enter(pos)
            node = self.build(pos, self.b.unary, "not", self.p_not())
            self.depth -= 1
            return node
        return self.p_compare()

    def p_compare(self):
        node = self.p_sum()
        kind, v, pos = self.peek()
        if kind == "op" and v in _COMPARE:
            self.take()
            node = self.build(pos, self.b.binary, _COMPARE[v], node, self.p_sum())
            kind2, v2, pos2 = self.peek()
            if kind2 == "op" and v2 in _COMPARE:
                raise ExprError("chained comparisons are not allowed; combine them with 'and'", pos2)
        return node

    def p_sum(self):
        return self._left_assoc(self.p_term, {"+": "add", "-": "sub"})

    def p_term(self):
        return self._left_assoc(self.p_unary, {"*": "mul", "/": "div"})

    def p_unary(self):
        kind, v, pos = self.peek()
        if kind == "op" and v in "+-":
            self.take()
            self.enter(pos)
            operand = self.p_unary()
            self.depth -= 1
            return operand if v == "+" else self.build(pos, self.b.unary, "neg", operand)
        return self.p_power()

    def p_power(self):
        base = self.p_atom()
        kind, v, pos = self.peek()
        if kind == "op" and v in ("**", "^"):
            self.take()
            self.enter(pos)
            exponent = self.p_unary()
            self.depth -= 1
            return self.build(pos, self.b.binary, "pow", base, exponent)
        return base

    def p_atom(self):
        kind, v, pos = self.take()
        if kind == "num":
            self.count(pos)
            try:
                return self.b.const(float(v))
            except ExprError:
                raise ExprError(f"number {v} is out of the float64 range", pos) from None
        if kind == "name":
            if v.startswith("__"):
                raise ExprError(f"names starting with '__' are not allowed: {v!r}", pos)
            if v in ("and", "or", "not"):
                raise ExprError(f"unexpected keyword '{v}'; put a condition in parentheses, "
                                "e.g. (not x > 1)", pos)
            if self.peek()[1] == "(" and self.peek()[0] == "op":
                return self.p_call(v, pos)
            return self.p_name(v, pos)
        if kind == "op" and v == "(":
            self.enter(pos)
            node = self.p_or()
            self.expect(")")
            self.depth -= 1
            return node
        found = "the end of the expression" if kind == "end" else repr(v)
        raise ExprError(f"expected a number, name or '(' but found {found}", pos)

    def p_name(self, name, pos):
        self.count(pos)
        if name in FUNCTIONS:
            raise ExprError(f"'{name}' is a function; call it as {name}(...)", pos)
        if name == TIME:
            return self.b.time()
        if name in CONSTANTS:
            return self.b.const(CONSTANTS[name])
        node = self.scope.get(name)
        if node is not None:
            return node
        if name in self.explain:
            raise ExprError(self.explain[name], pos)
        hint = suggest(name, list(self.scope) + [TIME] + list(CONSTANTS))
        raise ExprError(f"unknown name '{name}'", pos, hint)

    def p_call(self, name, pos):
        if name not in FUNCTIONS:
            hint = suggest(name, FUNCTIONS)
            raise ExprError(f"'{name}' is not a function; functions are "
                            + ", ".join(sorted(FUNCTIONS)), pos, hint)
        self.take()  # '('
        self.enter(pos)
        args = []
        if self.peek()[1] != ")":
            args.append(self.p_or())
            while self.peek()[1] == "," and self.peek()[0] == "op":
                self.take()
                args.append(self.p_or())
        self.expect(")")
        self.depth -= 1
        lo, hi = FUNCTIONS[name]
        if len(args) < lo or (hi is not None and len(args) > hi):
            want = str(lo) if lo == hi else f"at least {lo}"
            raise ExprError(f"{name}() takes {want} argument(s), got {len(args)}", pos)
        if name in _UNARY_FUNCS:
            return self.build(pos, self.b.unary, name, args[0])
        if name == "if":
            return self.build(pos, self.b.select, *args)
        node = args[0]
        for other in args[1:]:
            node = self.build(pos, self.b.binary, name, node, other)
        return node


def parse(text: object, scope: dict, builder: Builder, limits: Limits = DEFAULT_LIMITS,
          explain: dict | None = None) -> Node:
    """Parse ``text`` over the names in ``scope`` (name -> Node) into ``builder``'s tree.

    ``explain`` maps names that exist but may not be used here to the message to give.
    Raises :class:`ExprError` with the 0-based position of the problem.
    """
    precheck(text, limits)
    return _Parser(text, scope, builder, limits, explain).parse()
