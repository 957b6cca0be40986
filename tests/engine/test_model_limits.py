"""Hostile sizes are refused before the work they ask for, and caches stay within their bounds."""

import numpy as np
import pytest

from engine import model as M
from engine.kernels import vm
from engine.language.check import check_model, describe
from engine.model import ModelError, prepare


def rhs(prepared, y):
    k = prepared.kernel
    out = np.zeros(k.n)
    vm.rhs(k, 0.0, np.asarray(y, dtype=float), prepared.p, np.zeros(k.n_regs), out)
    return out


def test_a_huge_whole_coefficient_is_refused_with_its_position():
    issues = check_model({"states": {"a": 1.0, "b": 0.0},
                          "reactions": [{"equation": "999999999999999 a -> b", "k": 1.0}]})
    assert [(i.path, i.position) for i in issues] == [(("reactions", 0, "equation"), 0)]
    assert "larger than 1000" in issues[0].message


def test_a_high_order_costs_no_more_than_a_low_one_and_is_exact():
    # The largest allowed coefficient takes the expression path (power by squaring): the
    # structural mass-action arrays hold no entry per unit of order.
    model = {"states": {"a": 1.0005, "b": 0.0}, "parameters": {"k": 0.5},
             "reactions": [{"equation": "1000 a -> b", "k": "k"}]}
    prepared = prepare(model)
    assert len(prepared.kernel.ma) < 64
    rate = 0.5 * 1.0005 ** 1000  # mass action, common practice
    np.testing.assert_allclose(rhs(prepared, [1.0005, 0.0]), [-1000 * rate, rate], rtol=1e-12)


def dense_coupling(n: int) -> dict:
    """Every derivative reads every state through two shared sums (n^2 Jacobian entries)."""
    half = n // 2
    names = [f"x{i}" for i in range(n)]
    return {"states": {x: 1.0 for x in names},
            "derived": {"s1": "+".join(names[:half]), "s2": "+".join(names[half:])},
            "ddt": {x: f"-(s1 + s2)*{x}" for x in names}}


def test_a_model_with_too_many_jacobian_entries_is_refused_before_differentiating(monkeypatch):
    model = dense_coupling(800)  # 640,000 structural entries > 500,000

    def never(*args, **kwargs):
        raise AssertionError("the model was differentiated before its size was checked")

    monkeypatch.setattr(M, "jacobian", never)
    issues = check_model(model)
    assert len(issues) == 1 and "640000 non-zero entries" in issues[0].message
    with pytest.raises(ModelError, match="640000 non-zero"):
        prepare(model)
    with pytest.raises(ModelError, match="640000 non-zero"):
        describe(model)


def test_the_structural_count_matches_the_compiled_pattern():
    model = dense_coupling(40)
    assert describe(model)["counts"]["jacobian_nonzeros"] == 1600
    assert len(prepare(model).kernel.jac_rows) == 1600


def test_the_description_agrees_with_the_prepared_model():
    model = {"states": {"E": 1.0, "S": 1.0, "ES": 0.0, "P": 0.0},
             "reactions": [{"equation": "E + S <=> ES", "k": 1.0, "k_reverse": 0.5},
                           {"equation": "ES -> E + P", "k": 2.0}]}
    full = prepare(model).summary()
    light = describe(model)
    for key in ("states", "reactions", "conservation_laws", "stoichiometry", "counts", "content_hash"):
        assert light[key] == full[key], key


def test_the_prepare_cache_is_bounded_by_bytes(monkeypatch):
    M.clear_cache()
    budget = 1_000_000  # each model holds about 200 kB
    monkeypatch.setattr(M, "CACHE_BYTES", budget)
    for i in range(12):
        prepare(dense_coupling(60) | {"title": f"variant {i}"})
        models, used = M.cache_usage()
        assert used <= budget
    assert 0 < models < 12
    M.clear_cache()


def test_a_model_bigger_than_a_quarter_of_the_budget_is_not_kept(monkeypatch):
    M.clear_cache()
    monkeypatch.setattr(M, "CACHE_BYTES", 4_000)
    prepare(dense_coupling(30))
    assert M.cache_usage() == (0, 0)


def test_sizes_are_counted_in_time_linear_in_the_text():
    # Counting a 1,000-state fully coupled model touches each node once (bit sets), so it
    # answers although its Jacobian would hold a million entries.
    issues = check_model(dense_coupling(1000))
    assert "1000000 non-zero entries" in issues[0].message
