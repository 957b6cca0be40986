"""check_model and prepare: the JSON layout, issues keyed by path, caching, safety."""
from __future__ import annotations

import copy
import json
import math
import sys
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from engine.kernels import vm
from engine.model import ModelError, check_model, prepare

MODELS = Path(__file__).resolve().parents[2] / "examples" / "models"
EXAMPLES = sorted(p.name for p in MODELS.glob("*.json"))


def load(name):
    return json.loads((MODELS / name).read_text())


def issues_at(model):
    return {i.path: i for i in check_model(model)}


@pytest.mark.parametrize("name", EXAMPLES)
def test_example_models_prepare_and_summarise(name):
    model = load(name)
    assert check_model(model) == []
    prepared = prepare(model)
    summary = prepared.summary()
    json.dumps(summary, allow_nan=False)
    assert summary["counts"]["states"] == len(model["states"])
    k = prepared.kernel
    assert list(zip(k.jac_rows, k.jac_cols)) == sorted(zip(k.jac_rows, k.jac_cols))


def test_jacobian_of_every_example_matches_central_differences():
    for name in EXAMPLES:
        prepared = prepare(load(name))
        k = prepared.kernel
        y = prepared.y0 + 0.1 * np.arange(1, k.n + 1) / k.n
        regs, f1, f2 = np.zeros(k.n_regs), np.zeros(k.n), np.zeros(k.n)
        J = np.zeros((k.n, k.n))
        vm.jac_dense(k, 12.0, y, prepared.p, regs, np.zeros(len(k.jac_rows)), J)
        for j in range(k.n):
            h = 1e-6 * max(1.0, abs(y[j]))
            yp, ym = y.copy(), y.copy()
            yp[j] += h
            ym[j] -= h
            vm.rhs(k, 12.0, yp, prepared.p, regs, f1)
            vm.rhs(k, 12.0, ym, prepared.p, regs, f2)
            fd = (f1 - f2) / (2 * h)
            rounding = 1e-13 * (np.abs(f1).max() + 1.0) / h  # cancellation error of the difference
            np.testing.assert_allclose(J[:, j], fd, rtol=1e-5, atol=rounding + 1e-6 * np.abs(fd).max(),
                                       err_msg=f"{name}, column {j}")


def test_tarnwhistle_demo_has_derived_events_and_feed():
    prepared = prepare(load("tarnwhistle_hydrogenation.json"))
    assert prepared.aux_names == ("k2", "r1", "r2", "feed", "heat")
    assert prepared.event_names == ("hot_spot", "substrate_low")
    assert list(prepared.event_directions) == [1, -1]
    assert list(prepared.event_terminal) == [False, True]
    k = prepared.kernel
    aux = np.zeros(k.n_aux)
    for t, feed in ((9.0, 0.0), (10.0, 0.001)):
        vm.aux(k, t, prepared.y0, prepared.p, np.zeros(k.n_regs), aux)
        assert aux[3] == feed
    ev = np.zeros(2)
    vm.events(k, 0.0, prepared.y0, prepared.p, np.zeros(k.n_regs), ev)
    assert list(ev) == [330.0 - 340.0, 0.5 - 0.05]


def test_prepare_is_cached_by_content():
    a = prepare(load("robertson.json"))
    b = prepare(json.loads(json.dumps(load("robertson.json"), indent=3)))
    assert a is b and len(a.content_hash) == 64
    changed = load("robertson.json")
    changed["parameters"]["k1"] = 0.05
    assert prepare(changed) is not a


def test_prepared_arrays_are_read_only():
    prepared = prepare(load("robertson.json"))
    with pytest.raises(ValueError):
        prepared.p[0] = 1.0


def test_overrides():
    prepared = prepare(load("robertson.json"))
    p, y0 = prepared.with_overrides({"k1": 0.5}, {"y2": 1e-3})
    assert list(p) == [0.5, 3e7, 1e4] and list(y0) == [1.0, 1e-3, 0.0]
    with pytest.raises(ModelError) as info:
        prepared.with_overrides({"k_1": 1.0, "k2": math.nan}, {"y4": 1.0})
    got = {i.path: i for i in info.value.issues}
    assert got[("parameters", "k_1")].suggestion == "did you mean 'k1'?"
    assert "finite" in got[("parameters", "k2")].message
    assert ("initial", "y4") in got


BASE = {"states": {"A": 1.0, "B": {"initial": 0.0, "nonnegative": True}},
        "parameters": {"k_f": 0.1}, "ddt": {"A": "-k_f*A", "B": "k_f*A"}}


def variant(path, value):
    model = copy.deepcopy(BASE)
    target = model
    for key in path[:-1]:
        target = target.setdefault(key, {})
    target[path[-1]] = value
    return model


@pytest.mark.parametrize("path, value, where, fragment", [
    (("ddt", "A"), "-kf*A", ("ddt", "A"), "unknown name 'kf'"),
    (("ddt", "C"), "1", ("ddt", "C"), "not a state"),
    (("states", "A"), math.nan, ("states", "A"), "finite"),
    (("states", "A"), math.inf, ("states", "A"), "finite"),
    (("states", "A"), True, ("states", "A"), "finite"),
    (("parameters", "k_f"), "0.1", ("parameters", "k_f"), "finite"),
    (("parameters", "exp"), 1.0, ("parameters", "exp"), "reserved"),
    (("parameters", "A"), 1.0, ("parameters", "A"), "already defined"),
    (("parameters", "__class__"), 1.0, ("parameters", "__class__"), "'__'"),
    (("parameters", "k\uff46"), 1.0, ("parameters", "k\uff46"), "ASCII"),
    (("states", "B", "colour"), "red", ("states", "B", "colour"), "unknown key"),
    (("sates",), {}, ("sates",), "unknown key"),
    (("derived",), {"x": "y_ + 1", "y_": "2"}, ("derived", "x"), "defined later"),
    (("ddt", "A"), "(" * 10_000 + "A" + ")" * 10_000, ("ddt", "A"), "longer"),
    (("ddt", "A"), "(" * 300 + "A" + ")" * 300, ("ddt", "A"), "nest deeper"),
    (("ddt", "A"), "-" * 100_000 + "A", ("ddt", "A"), "longer"),
    (("ddt", "A"), "1" * 5_000, ("ddt", "A"), "longer"),
    (("ddt", "A"), "1" * 50, ("ddt", "A"), "digits"),
    (("ddt", "A"), "9**9**9", ("ddt", "A"), "exponent"),
    (("ddt", "A"), "A.__class__", ("ddt", "A"), "attribute"),
    (("ddt", "A"), "(lambda: 1)()", ("ddt", "A"), "not allowed"),
    (("ddt", "A"), "A[0]", ("ddt", "A"), "subscripts"),
    (("ddt", "A"), "'A'", ("ddt", "A"), "strings"),
    (("ddt", "A"), "eval(A)", ("ddt", "A"), "not a function"),
    (("ddt", "A"), ["A"], ("ddt", "A"), "expression"),
    (("reactions",), [{"equation": "A -> Q", "k": 1}], ("reactions", 0, "equation"), "unknown species"),
    (("reactions",), [{"equation": "A -> B"}], ("reactions", 0), "exactly one of"),
    (("reactions",), [{"equation": "A <=> B", "k": 1}], ("reactions", 0, "k_reverse"), "required"),
    (("reactions",), [{"equation": "A -> B", "arrhenius": {"A": 1, "T": 300, "Ea_unit": "eV"}}],
     ("reactions", 0, "arrhenius", "Ea_unit"), "one of"),
    (("events",), [{"when": "A - 0.5", "direction": "up"}], ("events", 0, "direction"), "rising"),
    (("events",), [{"direction": "rising"}], ("events", 0, "when"), "required"),
])
def test_issues_name_the_path_and_the_problem(path, value, where, fragment):
    found = issues_at(variant(path, value))
    assert where in found, found
    assert fragment in found[where].message
    with pytest.raises(ModelError):
        prepare(variant(path, value))


def test_issue_text_has_position_and_suggestion():
    (issue,) = check_model(variant(("ddt", "A"), "-kf*A"))
    assert issue.position == 1
    assert issue.text() == "position 1: unknown name 'kf'; did you mean 'k_f'?"


def test_size_limits_on_sections():
    from engine.language.limits import Limits
    many = {"states": {f"s{i}": 0.0 for i in range(20)}}
    (issue,) = check_model(many, Limits(max_states=10))
    assert issue.path == ("states",) and "limit is 10" in issue.message


def test_numbers_outside_float64_are_issues_not_crashes():
    found = issues_at({"states": {"A": 10 ** 400}, "ddt": {"A": 10 ** 400}})
    assert "finite" in found[("states", "A")].message
    assert ("ddt", "A") in found


def test_parameter_jacobian_of_robertson():
    from engine.model import parameter_jacobian
    pj = parameter_jacobian(load("robertson.json"))
    y1, y2, y3 = 0.9, 1e-4, 0.1
    expected = [[-y1, 0.0, y2 * y3], [y1, -y2 ** 2, -y2 * y3], [0.0, y2 ** 2, 0.0]]  # d f / d (k1, k2, k3)
    np.testing.assert_allclose(pj.dense(0.0, [y1, y2, y3], [0.04, 3e7, 1e4]), expected, rtol=1e-15)


def test_fixed_state_cannot_have_ddt_and_non_object_model():
    model = variant(("states", "A"), {"initial": 1.0, "clamped": True})
    assert "clamped" in issues_at(model)[("ddt", "A")].message
    assert check_model([1, 2])[0].path == ()
    assert check_model({})[0].path == ("states",)


JSON = st.recursive(st.none() | st.booleans() | st.floats() | st.integers() | st.text(max_size=20),
                    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=8), inner, max_size=4),
                    max_leaves=20)
KEYS = st.sampled_from(["states", "parameters", "derived", "ddt", "reactions", "events", "title"])


@settings(max_examples=300, deadline=None)
@given(st.dictionaries(KEYS, JSON, max_size=6))
def test_check_model_never_raises_on_garbage(model):
    assert isinstance(check_model(model), list)


def test_parse_and_prepare_raise_no_dangerous_audit_events():
    """No exec/compile/open/import/subprocess/socket happens while reading user models."""
    seen, active = [], [False]
    dangerous = ("exec", "compile", "open", "import", "subprocess", "os.system", "os.exec",
                 "socket", "ctypes", "pickle", "marshal")

    def hook(event, args):
        if active[0] and event.startswith(dangerous):
            seen.append(event)

    sys.addaudithook(hook)  # cannot be removed; it only records while active
    model = load("tarnwhistle_hydrogenation.json")
    model["title"] = "audit hook run"  # new content hash: not served from the cache
    hostile = variant(("ddt", "A"), "__import__('os').system('true')")
    active[0] = True
    try:
        prepare(model)
        check_model(hostile)
        check_model(variant(("ddt", "A"), "exec('1')"))
    finally:
        active[0] = False
    assert seen == []


@pytest.mark.parametrize("arrow, meant", [("=>", "->"), ("<->", "<=>")])
def test_a_foreign_arrow_gets_one_error_with_the_arrow_we_meant(arrow, meant):
    model = {"states": {"A": 1.0, "B": 0.0},
             "reactions": [{"equation": f"A {arrow} B", "k": 1.0, "k_reverse": 2.0}]}
    issues = check_model(model)
    assert [i.path for i in issues] == [("reactions", 0, "equation")]  # no k_reverse noise
    assert issues[0].position == 2 and issues[0].suggestion == f"did you mean '{meant}'?"


def test_a_name_one_character_off_gets_a_suggestion():
    issues = issues_at({"states": {"A": 1.0, "H2": 0.0}, "ddt": {"A": "-H3*A"}})
    assert issues[("ddt", "A")].suggestion == "did you mean 'H2'?"


def test_objects_where_a_word_is_expected_are_issues_not_crashes():
    # found by the contract run: an object as an event direction or an Ea unit raised TypeError
    model = {"states": {"a": 1.0, "b": 0.0},
             "reactions": [{"equation": "a -> b", "arrhenius": {"A": 1.0, "T": 300.0, "Ea_unit": {}}}],
             "events": [{"name": "half", "when": "a - 0.5", "direction": {"x": 1}}]}
    paths = {i.path for i in check_model(model)}
    assert ("reactions", 0, "arrhenius", "Ea_unit") in paths and ("events", 0, "direction") in paths
