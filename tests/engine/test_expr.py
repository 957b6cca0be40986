"""The expression language: grammar, folding, sharing, and rejection of hostile input."""
from __future__ import annotations

import math
import sys

import pytest
from hypothesis import given, settings, strategies as st

from engine.language.expr import Builder, ExprError, evaluate, to_text
from engine.language.parser import parse
from engine.language.limits import Limits


@pytest.fixture
def env():
    b = Builder()
    scope = {"A": b.var("y", 0, "A"), "B": b.var("y", 1, "B"), "k_f": b.var("p", 0, "k_f")}
    return b, scope


def value(text, env, y=(2.0, 3.0), p=(0.5,), t=1.5):
    b, scope = env
    return evaluate([parse(text, scope, b)], t, y, p)[0]


def error(text, env, limits=Limits()):
    b, scope = env
    with pytest.raises(ExprError) as info:
        parse(text, scope, b, limits)
    return info.value


@pytest.mark.parametrize("text, expected", [
    ("1 + 2*3", 7.0),
    ("2^3^2", 2.0 ** 9),                 # power is right-associative
    ("2**3", 8.0),
    ("-A^2", -4.0),                      # unary minus binds looser than power
    ("2^-1", 0.5),
    ("(A + B) * k_f", 2.5),
    ("A / B / 2", 2.0 / 3.0 / 2.0),
    ("A - B - 1", -2.0),
    ("exp(0) + log(1) + log10(100) + sqrt(16)", 7.0),
    ("sin(0) + cos(0) + tan(0) + sinh(0) + cosh(0) + tanh(0)", 2.0),
    ("abs(-A) + sign(-B) + step(t - 1) + step(t - 2)", 2.0),
    ("min(A, B, 1) + max(A, B)", 4.0),
    ("if(A < B, 10, 20)", 10.0),
    ("if(A >= B or not (A == 2), 10, 20)", 20.0),
    ("if(A != B and B <= 3, 1, 0)", 1.0),
    ("t * 2", 3.0),
    ("2*pi", 2 * math.pi),
    ("1.5e2 + .5 + 3.", 153.5),
])
def test_grammar_evaluates_as_written(text, expected, env):
    assert value(text, env) == pytest.approx(expected, rel=1e-15)


def test_constants_fold_and_identities_simplify(env):
    b, scope = env
    assert to_text(parse("2*3 + 1", scope, b)) == "7.0"
    assert to_text(parse("A*1 + 0", scope, b)) == "A"
    assert to_text(parse("A - A", scope, b)) == "0.0"
    assert to_text(parse("--A", scope, b)) == "A"
    assert to_text(parse("A^1", scope, b)) == "A"
    assert parse("if(1 > 0, A, B)", scope, b) is scope["A"]


def test_equal_subexpressions_are_one_node(env):
    b, scope = env
    x = parse("exp(A*k_f) + B", scope, b)
    y = parse("B*exp(k_f*A)", scope, b)
    shared = parse("exp(k_f*A)", scope, b)
    assert shared in x.args and shared in y.args
    assert parse("A*B", scope, b) is parse("B*A", scope, b)  # commutative operands are ordered


def test_nodes_are_immutable(env):
    b, scope = env
    with pytest.raises(AttributeError):
        scope["A"].op = "p"


def test_unknown_name_suggests_close_names(env):
    err = error("2*kf + A", env)
    assert err.position == 2
    assert "unknown name 'kf'" in err.message
    assert err.suggestion == "did you mean 'k_f'?"


@pytest.mark.parametrize("text, fragment, position", [
    ("A +", "found the end", 3),
    ("(A + B", "unclosed", 0),
    ("A + B)", "unmatched", 5),
    ("A.real", "attribute access", 1),
    ("A[0]", "subscripts", 1),
    ("'A'", "strings", 0),
    ("A = 1", "use ==", 2),
    ("A # comment", "'#'", 2),
    ("lambda: 1", "':'", 6),
    ("__import__(A)", "'__'", 0),
    ("__builtins__", "'__'", 0),
    ("A.__class__", "attribute access", 1),
    ("open(A)", "not a function", 0),
    ("exp(A, B)", "takes 1", 0),
    ("if(A, B)", "takes 3", 0),
    ("exp", "is a function", 0),
    ("A < B < 1", "chained comparisons", 6),
    ("\uff21 + 1", "printable ASCII", 0),      # full-width A must not become A
    ("A\t+ 1", "printable ASCII", 1),
    ("1e400", "float64 range", 0),
    ("log(0)", "finite", 0),
    ("9**9**9", "exponent", 1),               # a constant tower is rejected, not evaluated
    ("A^5000", "exponent", 1),
    ("", "empty", 0),
])
def test_bad_expressions_report_problem_and_position(text, fragment, position, env):
    err = error(text, env)
    assert fragment in err.message
    assert err.position == position


@pytest.mark.parametrize("text", [
    "(" * 10_000 + "A" + ")" * 10_000,      # CPython's parser fails past 200 nested parentheses
    "-" * 100_000 + "A",                     # CPython fails with MemoryError/RecursionError
    "1" * 5_000,                             # CPython refuses int literals over 4,300 digits
    "A" + "+A" * 50_000,
])
def test_hostile_sizes_are_rejected_by_limits(text, env):
    error(text, env)


def test_limits_are_configurable(env):
    tight = Limits(max_nesting_depth=3, max_literal_digits=3, max_expression_length=20,
                   max_expression_nodes=5)
    assert "deeper" in error("((((A))))", env, tight).message
    assert "deeper" in error("----A", env, tight).message
    assert "digits" in error("12345", env, tight).message
    assert "longer" in error("A" + " " * 30, env, tight).message
    assert "terms" in error("A+A+A+A+A", env, tight).message


def test_long_flat_sums_do_not_recurse(env):
    b, scope = env
    limits = Limits(max_expression_length=100_000, max_expression_nodes=100_000)
    node = parse("+".join(["A*k_f"] * 5000), scope, b, limits)
    assert evaluate([node], 0.0, [2.0, 0.0], [0.5])[0] == pytest.approx(5000.0)
    assert sys.getrecursionlimit() < 5000  # the walk above is iterative


TOKENS = ["A", "B", "k_f", "t", "1", "2.5", "1e3", "+", "-", "*", "/", "^", "**", "(", ")", ",",
          "<", ">=", "==", "and", "or", "not", "exp(", "min(", "if(", "log(", "abs(", " ", "x",
          ".", "[", "'", "__", "#", "9**9**9"]


@settings(max_examples=400, deadline=None)
@given(st.lists(st.sampled_from(TOKENS), max_size=40))
def test_parser_returns_a_tree_or_an_expr_error(tokens):
    b = Builder()
    scope = {"A": b.var("y", 0, "A"), "B": b.var("y", 1, "B"), "k_f": b.var("p", 0, "k_f")}
    try:
        node = parse("".join(tokens), scope, b)
    except ExprError as err:
        assert err.position is None or 0 <= err.position <= len("".join(tokens))
    else:
        evaluate([node], 0.5, [1.0, 2.0], [3.0])


@settings(max_examples=200, deadline=None)
@given(st.text(max_size=60))
def test_arbitrary_text_never_crashes_the_parser(text):
    b = Builder()
    try:
        parse(text, {"A": b.var("y", 0, "A")}, b)
    except ExprError:
        pass
