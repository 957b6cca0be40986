"""Fuzzing the job spec and expression reader: 5,000 cases each in CI.

Every input either loads or raises marshmallow's ValidationError (a 422 in the API):
no other exception, and no dangerous audit event (exec, compile, open, import,
subprocess, socket) while reading user text.
"""
import copy
import os
import sys

from hypothesis import HealthCheck, given, settings, strategies as st
from marshmallow import ValidationError

from schemas.job import JobSpecSchema

CASES = int(os.environ.get("STIFFLANE_FUZZ_CASES", "5000"))
DANGEROUS = ("exec", "compile", "open", "import", "subprocess", "os.system", "os.exec", "os.posix_spawn",
             "socket", "ctypes", "pickle", "marshal")
_seen: list[str] = []
_active = [False]


def _hook(event, args):
    if _active[0] and event.startswith(DANGEROUS):
        _seen.append(event)


sys.addaudithook(_hook)  # cannot be removed; records only while a fuzz test runs

BASE = {
    "model": {"states": {"a": 1.0, "b": 0.0}, "parameters": {"k": 2.0},
              "derived": {"r": "k*a"}, "ddt": {"a": "-r", "b": "r"}},
    "span": [0.0, 1.0], "output": {"count": 5}, "tolerance": {"rtol": 1e-6, "atol": 1e-9},
}
EXPR_CHARS = "ab kr0123456789.eE+-*/^()<>=!,_ \tx#'\"[]{}:;@`\\" + "ｋ"
JSON = st.recursive(st.none() | st.booleans() | st.integers() | st.floats(allow_nan=True) | st.text(max_size=12),
                    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=8), inner, max_size=4),
                    max_leaves=15)
PATHS = [("model", "ddt", "a"), ("model", "derived", "r"), ("model", "states", "a"), ("model", "parameters"),
         ("span",), ("output",), ("tolerance", "atol"), ("method",), ("limits",), ("initial",), ("model",),
         ("model", "reactions"), ("model", "events")]


def load(body) -> None:
    _active[0] = True
    try:
        JobSpecSchema().load(body)
    except ValidationError:
        pass
    finally:
        _active[0] = False


def put(body: dict, path: tuple, value) -> dict:
    out = copy.deepcopy(body)
    node = out
    for key in path[:-1]:
        node = node.setdefault(key, {}) if isinstance(node, dict) else node
    if isinstance(node, dict):
        node[path[-1]] = value
    return out


FUZZ = settings(max_examples=CASES, deadline=None, database=None, derandomize=True,
                suppress_health_check=list(HealthCheck))


@FUZZ
@given(text=st.text(alphabet=EXPR_CHARS, max_size=60))
def test_any_expression_text_loads_or_is_a_validation_error(text):
    load(put(BASE, ("model", "ddt", "a"), text))
    assert _seen == []


@FUZZ
@given(path=st.sampled_from(PATHS), value=JSON)
def test_any_value_anywhere_loads_or_is_a_validation_error(path, value):
    load(put(BASE, path, value))
    assert _seen == []
