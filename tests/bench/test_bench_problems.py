"""The hand-written peers' functions compute the same model as the engine's kernel."""
import numpy as np
import pytest

from bench import jitted, problems as PR
from engine.kernels import vm

SMALL = ("robertson", "hires", "vanderpol", "arenstorf", "lorenz", "ramp", "brusselator4")


def _engine(problem, t, y):
    pm = PR.prepare_problem(problem)
    k = pm.kernel
    regs = np.zeros(max(k.n_regs, 1))
    f = np.zeros(k.n)
    vm.rhs(k, t, y, np.array(pm.p), regs, f)
    J = np.zeros((k.n, k.n))
    vm.jac_dense(k, t, y, np.array(pm.p), regs, np.zeros(len(k.jac_rows)), J)
    return pm, f, J


@pytest.mark.parametrize("name", SMALL)
def test_numpy_and_numba_right_hand_sides_match_the_model(name):
    problem = PR.build(name)
    rng = np.random.default_rng(7)
    pm = PR.prepare_problem(problem)
    y = np.array(pm.y0) * (1 + 0.1 * rng.random(problem.n)) + 0.01 * rng.random(problem.n)
    t = 2.0  # after the Brusselator's source switches on
    _, f, J = _engine(problem, t, y)
    assert np.allclose(problem.f(t, y), f, rtol=1e-12, atol=1e-12)
    out = np.zeros(problem.n)
    getattr(jitted, problem.jit + "_rhs")(t, y, out, problem.p_jit)
    assert np.allclose(out, f, rtol=1e-12, atol=1e-12)
    if problem.jac is not None:
        Jh = problem.jac(t, y)
        Jh = Jh.toarray() if hasattr(Jh, "toarray") else Jh
        assert np.allclose(Jh, J, rtol=1e-12, atol=1e-12)
        Jn = np.zeros_like(J)
        getattr(jitted, problem.jit + "_jac")(t, y, Jn, problem.p_jit)
        assert np.allclose(Jn, J, rtol=1e-12, atol=1e-12)


def test_brusselator_csc_values_follow_the_sparsity_pattern():
    from bench.brusselator import sparsity
    problem = PR.build("brusselator4")
    y = np.linspace(0.5, 3.0, problem.n)
    _, _, J = _engine(problem, 0.0, y)
    pat = sparsity(4).tocsc()
    pat.sort_indices()
    vals = np.zeros(pat.nnz)
    jitted.bruss_csc_values(y, problem.p_jit, pat.indptr.astype(np.int64),
                            pat.indices.astype(np.int64), vals)
    dense = np.zeros_like(J)
    for c in range(problem.n):
        for q in range(pat.indptr[c], pat.indptr[c + 1]):
            dense[pat.indices[q], c] = vals[q]
    assert np.allclose(dense, J, rtol=1e-12, atol=1e-12)


def test_every_problem_names_its_source_and_marks_invented_ones():
    for name in PR.NAMES:
        problem = PR.build(name) if not name.endswith("128") else None
        if problem is None:
            continue
        assert problem.source
    assert "invented" in PR.build("ramp").source
    assert PR.RAMP_MODEL["title"].startswith("Invented example")
