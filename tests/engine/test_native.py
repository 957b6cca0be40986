"""The machine-code tier (engine.kernels.native): same values as the interpreter, bounded, chosen by policy.

The interpreter (engine.kernels.vm.run) is the specification; the published-problem checks
run the machine-code kernels against the same external references as the
interpreter's tests (test_integrate_methods.py).
"""
from __future__ import annotations

from dataclasses import replace

import os
import numpy as np
import pytest
from hypothesis import assume, given, settings, strategies as st

from engine.kernels import native, vm
from engine.integrate import SUCCEEDED
from engine.model import ModelError, prepare
from tests.engine import kernels as K
from tests.engine.test_integrate_methods import (HIRES_END_REF, ROBERTSON_1E11, scipy_reference,
                                                 solve, tol_units)


def compiled(spec):
    m = prepare(spec)
    out = native.build(m.kernel, len(m.param_names))
    assert out.used, out.reason
    return m, out.kernel


def _with(m, kernel):
    return replace(m, kernel=kernel)


def same(a, b):
    """Bit-identical, NaN matching NaN."""
    return np.array_equal(a, b, equal_nan=True)


def evaluate_both(m, kernel, t, y):
    regs = np.zeros(m.kernel.n_regs)
    p = np.array(m.p, dtype=float)
    y = np.asarray(y, dtype=float)
    f0, f1 = np.zeros(m.kernel.n), np.zeros(m.kernel.n)
    vm.rhs(m.kernel, t, y, p, regs, f0)
    vm.rhs(kernel, t, y, p, regs, f1)
    nnz = len(m.kernel.jac_rows)
    j0, j1 = np.zeros(nnz), np.zeros(nnz)
    vm.jac_values(m.kernel, t, y, p, regs, j0)
    vm.jac_values(kernel, t, y, p, regs, j1)
    return (f0, j0), (f1, j1)


@pytest.mark.parametrize("spec", [K.ROBERTSON, K.HIRES, K.VAN_DER_POL, K.ARENSTORF, K.LORENZ],
                         ids=lambda s: s["title"])
def test_right_hand_side_and_jacobian_are_bit_identical_to_the_interpreter(spec):
    m, kernel = compiled(spec)
    rng = np.random.default_rng(7)
    for _ in range(20):
        y = rng.normal(size=m.kernel.n) * 10.0 ** rng.integers(-8, 3)
        (f0, j0), (f1, j1) = evaluate_both(m, kernel, float(rng.random()), y)
        assert same(f0, f1) and same(j0, j1)


EVERY_FUNCTION = {
    "title": "every function and operator of the model language",
    "states": {"x": 0.5, "y": -0.25},
    "parameters": {"a": 1.5},
    "derived": {"u": "exp(x) + log(abs(y) + 1e-300) + log10(a) + sqrt(a) + sin(x) * cos(y) + tan(x/4)",
                "v": "sinh(y) + cosh(x) + tanh(x*y) + abs(x) + sign(y) + step(x - 0.1)",
                "w": "min(x, y, a) + max(x, y) + if(x > y and not (y >= 0 or x == a), x, y)",
                "z": "x^a + y^3 + y^-2 + (x < a) + (x <= y) + (x != y) + pi * t"},
    "ddt": {"x": "u - v + w", "y": "z * x - a * y"},
}


def test_every_operation_matches_the_interpreter_including_edge_values():
    m, kernel = compiled(EVERY_FUNCTION)
    points = [(0.5, -0.25), (0.0, 0.0), (-3.0, 2.0), (800.0, -800.0), (-1e-300, 1e300),
              (np.nan, 1.0), (np.inf, -np.inf), (0.1, 0.1)]
    for t, (x, y) in zip([0.0, 1.0, 2.5, 1e9, -1.0, 3.0, 0.0, 7.0], points):
        with np.errstate(all="ignore"):
            (f0, j0), (f1, j1) = evaluate_both(m, kernel, t, [x, y])
        assert same(f0, f1) and same(j0, j1), (x, y)


LEAF = st.sampled_from(["x", "y", "a", "0.5", "2", "t"])


def _expr(depth):
    if depth == 0:
        return LEAF
    sub = _expr(depth - 1)
    return st.one_of(
        LEAF,
        st.tuples(sub, st.sampled_from(["+", "-", "*", "/", "^"]), sub).map(lambda s: f"({s[0]} {s[1]} {s[2]})"),
        st.tuples(st.sampled_from(["exp", "log", "sqrt", "sin", "tanh", "abs", "step"]), sub)
        .map(lambda s: f"{s[0]}({s[1]})"),
        st.tuples(sub, sub, sub).map(lambda s: f"if({s[0]} > {s[1]}, {s[2]}, {s[1]})"),
    )


@settings(max_examples=12, deadline=None)
@given(_expr(3), _expr(3), st.floats(-5, 5), st.floats(-5, 5))
def test_generated_models_match_the_interpreter(fx, fy, x, y):
    spec = {"states": {"x": 0.1, "y": 0.2}, "parameters": {"a": 1.3}, "ddt": {"x": fx, "y": fy}}
    try:
        m, kernel = compiled(spec)
    except ModelError as err:  # constants folded out of float64 range: a specified refusal
        assume("finite" not in str(err))
        raise
    with np.errstate(all="ignore"):
        (f0, j0), (f1, j1) = evaluate_both(m, kernel, 0.7, [x, y])
    assert same(f0, f1) and same(j0, j1)


@pytest.mark.parametrize("method", ["auto", "radau_iia_5", "rosenbrock_4", "bdf"])
def test_robertson_with_machine_code_meets_the_published_solution(method):
    # Hairer & Wanner II, sec. IV.1 and IV.10; Test Set for IVP Solvers (values in
    # test_integrate_methods.py).
    m, kernel = compiled(K.ROBERTSON)
    sol = solve(_with(m, kernel), 1e11, method, 1e-6, 1e-10)
    assert sol.outcome == SUCCEEDED
    assert tol_units(sol.y[-1], ROBERTSON_1E11, 1e-6, 1e-10) < 10
    assert abs(sol.y[-1].sum() - 1.0) < 1e-10  # y1 + y2 + y3 = 1 exactly


def test_hires_and_van_der_pol_with_machine_code_meet_their_references():
    # HIRES: Test Set for IVP Solvers; Van der Pol mu = 1000: SciPy Radau at rtol 1e-12.
    m, kernel = compiled(K.HIRES)
    sol = solve(_with(m, kernel), K.HIRES_END, "auto", 1e-7, 1e-11)
    assert tol_units(sol.y[-1], HIRES_END_REF, 1e-7, 1e-11) < 10
    m, kernel = compiled(K.VAN_DER_POL)
    sol = solve(_with(m, kernel), 3000.0, "auto", 1e-7, 1e-9)
    assert tol_units(sol.y[-1], scipy_reference(K.VAN_DER_POL, 3000.0), 1e-7, 1e-9) < 10


def test_a_solve_takes_the_same_steps_with_either_tier():
    m, kernel = compiled(K.HIRES)
    a = solve(m, K.HIRES_END, "auto", 1e-6, 1e-10)
    b = solve(_with(m, kernel), K.HIRES_END, "auto", 1e-6, 1e-10)
    assert same(a.y, b.y)
    assert a.report["accepted_steps"] == b.report["accepted_steps"]
    assert a.report["rhs_evaluations"] == b.report["rhs_evaluations"]


def test_generated_source_holds_no_text_from_the_model():
    spec = {"title": "import os; os.system('x')",
            "states": {"os_system": 1.0, "eval_me": 0.0}, "parameters": {"exec_this": 2.0},
            "ddt": {"os_system": "-exec_this*os_system", "eval_me": "exec_this*os_system"}}
    m = prepare(spec)
    source = native.module_source(m.kernel, len(m.param_names))
    for word in ("os_system", "eval_me", "exec_this", "import os"):
        assert word not in source
    assert "import math" in source  # the fixed header is all the imports there are


def test_a_program_over_the_row_limit_stays_interpreted(monkeypatch):
    monkeypatch.setattr(native, "MAX_ROWS", 3)
    m = prepare(K.HIRES)
    out = native.build(m.kernel, 0)
    assert not out.used and "limit 3" in out.reason
    assert out.kernel is m.kernel


def lorenz_variant(shift: float, title: str) -> dict:
    """Lorenz with an invented constant term: a program no other test compiles."""
    return dict(K.LORENZ, title=title, ddt=dict(K.LORENZ["ddt"], x=f"s*(y - x) + {shift}"))


@pytest.fixture
def empty_disk_cache(tmp_path, monkeypatch):
    monkeypatch.setattr(native, "_cache_folder", lambda: tmp_path)
    return tmp_path


def test_one_process_compiles_a_bounded_number_of_models(monkeypatch, empty_disk_cache):
    monkeypatch.setattr(native, "MAX_PER_PROCESS", native.loaded())
    out = native.build(prepare(lorenz_variant(0.0625, "bound test")).kernel, 3)
    assert not out.used and "compiled models" in out.reason


def test_a_failed_compile_leaves_the_interpreter_running(monkeypatch, empty_disk_cache):
    def broken(digest, source):
        raise OSError("No space left on device")
    monkeypatch.setattr(native, "_load", broken)
    m = prepare(lorenz_variant(0.75, "failed compile test"))
    out = native.build(m.kernel, 3)
    assert not out.used and "compile failed (OSError)" in out.reason and out.kernel is m.kernel
    sol = solve(m, 1.0, "auto", 1e-6, 1e-9)
    assert sol.outcome == SUCCEEDED


def test_auto_compiles_on_second_use_or_for_large_batches_and_never_means_never(empty_disk_cache):
    single = prepare(lorenz_variant(0.25, "policy test: single jobs"))
    batch = prepare(lorenz_variant(0.375, "policy test: batch"))
    m, info = native.choose(single, native.AUTO)  # nothing compiled on disk: interpreted
    assert not info["used"] and "cost more than it saves" in info["reason"] and m is single
    m, info = native.choose(single, native.AUTO)  # asked again: compiled in the background,
    assert not info["used"] and "background" in info["reason"]  # this run does not wait for it
    assert native.wait_for_background()
    m, info = native.choose(single, native.AUTO)  # the next run finds the machine code
    assert info["used"] and m.kernel.native_rhs != 0
    assert list(empty_disk_cache.glob("k_*.py"))  # kept on disk for the next process
    m, info = native.choose(batch, native.NEVER, solves=10_000)
    assert not info["used"] and m.kernel.native_rhs == 0
    m, info = native.choose(batch, native.AUTO, solves=native.BATCH_MIN_MEMBERS - 1)
    assert not info["used"]  # a small batch of a new model: not worth a compile
    m, info = native.choose(batch, native.AUTO, solves=native.BATCH_MIN_MEMBERS)
    assert info["used"]
    m, info = native.choose(prepare(lorenz_variant(0.5, "policy test: always")), native.ALWAYS)
    assert info["used"]


def test_events_run_as_machine_code_and_are_located_as_before():
    # y' = -k y, y(0) = 1 crosses 1/2 at t = ln 2 / k and 1/4 at 2 ln 2 / k (exact solution).
    spec = {"title": "decay with two events (native test)", "states": {"y": 1.0},
            "parameters": {"k": 1.5}, "ddt": {"y": "-k*y"},
            "events": [{"name": "half", "when": "y - 0.5", "direction": "falling"},
                       {"name": "quarter", "when": "y - 0.25", "stop": True}]}
    m, kernel = compiled(spec)
    assert kernel.native_events != 0
    runs = [solve(mm, 10.0, "auto", 1e-8, 1e-12, event_directions=m.event_directions,
                  event_terminal=m.event_terminal) for mm in (m, _with(m, kernel))]
    assert same(runs[0].event_t, runs[1].event_t)
    assert np.allclose(runs[1].event_t, [np.log(2) / 1.5, 2 * np.log(2) / 1.5], rtol=1e-7)
    assert runs[1].terminal_event == 1


def test_a_long_interpreted_run_moves_to_machine_code_midway_with_the_same_values(
        monkeypatch, empty_disk_cache):
    from engine import integrate as I
    monkeypatch.setattr(I, "TIER_UP_SECONDS", 0.0)  # move at the first chunk boundary
    monkeypatch.setattr(native, "compile_estimate", lambda kernel: 0.0)
    # harmonic oscillator over ~300 periods: many chunks of 2,000+ steps (exact: cos t)
    spec = {"title": "oscillator (tier-up test)", "states": {"u": 1.0, "v": 0.0},
            "parameters": {"w": 1.0}, "ddt": {"u": "w*v", "v": "-w*u + 0.0"}}
    m = prepare(spec)
    runs = [solve(m, 2000.0, "dormand_prince_54", 1e-10, 1e-12, machine_code=mode)
            for mode in ("never", "auto")]
    assert runs[0].machine_code_from is None
    moved = runs[1].machine_code_from
    assert moved is not None and 0.0 < moved["t"] < 2000.0
    assert same(runs[0].y, runs[1].y)  # bit-identical: only the evaluation tier changed
    assert abs(runs[1].y[-1][0] - np.cos(2000.0)) < 1e-5


def test_unknown_machine_code_option_is_refused():
    m = prepare(K.LORENZ)
    with pytest.raises(ValueError, match="machine_code"):
        solve(m, 1.0, "auto", 1e-6, 1e-9, machine_code="sometimes")


def test_the_disk_cache_drops_the_least_recently_used_models_beyond_its_budget(tmp_path):
    from engine.kernels import disk_cache

    folder, compiled = tmp_path / "native", tmp_path / "native_0a1b"
    folder.mkdir()
    compiled.mkdir()
    for age, digest in enumerate(["old", "mid", "new"]):
        module = folder / f"k_{digest}.py"
        module.write_bytes(b"x" * 1000)
        (compiled / f"k_{digest}.rhs-10.py311.nbi").write_bytes(b"y" * 500)
        os.utime(module, (1000.0 + age, 1000.0 + age))
    assert disk_cache.usage(folder) == (3, 4500)
    disk_cache.touch(folder / "k_old.py")  # used just now: the newest
    assert disk_cache.prune(folder, budget=3000) == 1
    assert sorted(p.name for p in folder.iterdir()) == ["k_new.py", "k_old.py"]
    assert not list(compiled.glob("k_mid.*"))
    assert disk_cache.prune(folder, budget=0, keep=frozenset({"new"})) == 1
    assert disk_cache.usage(folder) == (1, 1500)
