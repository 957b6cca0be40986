"""Reaction networks: equations, mass action, Arrhenius, stoichiometry, conservation laws."""
from __future__ import annotations

import json
import math
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest

from engine.kernels import vm
from engine.language.expr import ExprError
from engine.model import prepare
from engine.language.reactions import GAS_CONSTANT, parse_equation

MODELS = Path(__file__).resolve().parents[2] / "examples" / "models"


def rhs(prepared, y, p=None, t=0.0):
    k = prepared.kernel
    out = np.zeros(k.n)
    vm.rhs(k, t, np.asarray(y, float), prepared.p if p is None else p, np.zeros(k.n_regs), out)
    return out


def jac(prepared, y):
    k = prepared.kernel
    J = np.zeros((k.n, k.n))
    vm.jac_dense(k, 0.0, np.asarray(y, float), prepared.p, np.zeros(k.n_regs),
                 np.zeros(len(k.jac_rows)), J)
    return J


def test_equation_syntax():
    species = ("A", "B", "C")
    eq = parse_equation("2 A + B -> C", species)
    assert eq.reactants == (("A", 2), ("B", 1)) and eq.products == (("C", 1),)
    assert not eq.reversible
    assert parse_equation("A <=> 0.5 B + 1.5C", species).products == (("B", Fraction(1, 2)),
                                                                     ("C", Fraction(3, 2)))
    assert parse_equation("A + A -> ", species).reactants == (("A", 2),)  # sink, repeated species
    assert parse_equation(" -> C", species).reactants == ()                # source


@pytest.mark.parametrize("text, fragment, position", [
    ("A + D -> C", "unknown species 'D'", 4),
    ("A -> B -> C", "exactly one arrow", 7),
    ("A = B", "is not an arrow of the model language", 2),
    ("A => B", "is not an arrow of the model language", 2),
    ("A + -> B", "expected a term", 4),
    ("2 3 A -> B", "expected a term", 0),
    ("0 A -> B", "positive", 0),
    (" -> ", "both sides", 1),
    ("A\u2192B", "printable ASCII", 1),
])
def test_bad_equations_say_where(text, fragment, position):
    with pytest.raises(ExprError) as info:
        parse_equation(text, ("A", "B", "C"))
    assert fragment in info.value.message
    assert info.value.position == position


def test_unknown_species_gets_a_suggestion():
    with pytest.raises(ExprError) as info:
        parse_equation("H2 + O -> H2O", ("H2", "O2", "H2O"))
    assert info.value.suggestion == "did you mean 'O2'?"


def robertson_by_hand(y, k1=0.04, k2=3e7, k3=1e4):
    """Robertson (1966), as printed in Hairer & Wanner, Solving ODEs II, sec. IV.1, eq. (1.4)."""
    y1, y2, y3 = y
    return np.array([-k1 * y1 + k3 * y2 * y3,
                     k1 * y1 - k3 * y2 * y3 - k2 * y2 ** 2,
                     k2 * y2 ** 2])


def test_robertson_reactions_give_the_published_equations():
    prepared = prepare(json.loads((MODELS / "robertson.json").read_text()))
    rng = np.random.default_rng(1)
    for y in rng.uniform(0, 1, size=(50, 3)) * [1.0, 1e-4, 1.0]:
        np.testing.assert_allclose(rhs(prepared, y), robertson_by_hand(y), rtol=1e-14, atol=1e-300)
        y1, y2, y3 = y
        J = [[-0.04, 1e4 * y3, 1e4 * y2],
             [0.04, -1e4 * y3 - 6e7 * y2, -1e4 * y2],
             [0.0, 6e7 * y2, 0.0]]
        np.testing.assert_allclose(jac(prepared, y), J, rtol=1e-14)


def test_robertson_conservation_law_is_found():
    prepared = prepare(json.loads((MODELS / "robertson.json").read_text()))
    np.testing.assert_array_equal(prepared.conservation, [[1.0, 1.0, 1.0]])
    assert prepared.conservation_labels == ("y1 + y2 + y3",)
    np.testing.assert_array_equal(prepared.stoichiometry, [[-1, 0, 1], [1, -1, -1], [0, 1, 0]])


def test_arrhenius_matches_a_hand_computation():
    model = {"states": {"A": 2.0, "B": 0.0}, "parameters": {"T": 350.0},
             "reactions": [{"equation": "A -> B",
                            "arrhenius": {"A": 1e10, "n": 0.5, "Ea": 80, "Ea_unit": "kJ/mol", "T": "T"}}]}
    k = 1e10 * 350.0 ** 0.5 * math.exp(-80e3 / (8.314462618 * 350.0))  # R: CODATA 2018, exact in SI 2019
    assert GAS_CONSTANT == 8.314462618
    np.testing.assert_allclose(rhs(prepare(model), [2.0, 0.0]), [-2 * k, 2 * k], rtol=1e-13)


@pytest.mark.parametrize("unit, ea, ea_over_r", [
    ("J/mol", 8314.462618, 1000.0), ("kJ/mol", 8.314462618, 1000.0),
    ("cal/mol", 1000.0, 4184.0 / 8.314462618),  # thermochemical calorie, exactly 4.184 J (NIST SP 811, App. B; ISO 80000-5)
    ("kcal/mol", 1.0, 4184.0 / 8.314462618), ("K", 1000.0, 1000.0),
])
def test_activation_energy_units(unit, ea, ea_over_r):
    model = {"states": {"A": 1.0}, "reactions": [
        {"equation": "A -> ", "arrhenius": {"A": 1.0, "Ea": ea, "Ea_unit": unit, "T": 500.0}}]}
    assert rhs(prepare(model), [1.0])[0] == pytest.approx(-math.exp(-ea_over_r / 500.0), rel=1e-13)


def test_reversible_fractional_and_custom_rates():
    model = {"states": {"A": 1.0, "B": 0.5, "C": 0.2}, "parameters": {"vmax": 2.0, "km": 0.3},
             "reactions": [{"equation": "A <=> 2 B", "k": 3.0, "k_reverse": 0.5},
                           {"equation": "0.5 A -> C", "k": 1.5},
                           {"equation": "C -> ", "rate": "vmax*C/(km + C)"}]}
    A, B, C = 0.8, 0.4, 0.2
    r1, r2, r3 = 3.0 * A - 0.5 * B ** 2, 1.5 * A ** 0.5, 2.0 * C / (0.3 + C)
    expected = [-r1 - 0.5 * r2, 2 * r1, r2 - r3]
    np.testing.assert_allclose(rhs(prepare(model), [A, B, C]), expected, rtol=1e-14)


def test_clamped_species_and_states_with_their_own_ddt_are_left_out_of_laws():
    model = {"states": {"E": 1.0, "S": 1.0, "ES": 0.0, "P": 0.0, "W": {"initial": 55.0, "clamped": True}},
             "ddt": {"P": "-0.1*P"},
             "reactions": [{"equation": "E + S <=> ES", "k": 1.0, "k_reverse": 0.5},
                           {"equation": "ES + W -> E + P", "k": 2.0}]}
    prepared = prepare(model)
    out = rhs(prepared, [1.0, 1.0, 0.5, 0.2, 55.0])
    assert out[4] == 0.0  # clamped: held constant although it reacts
    labels = set(prepared.conservation_labels)
    assert labels == {"E + ES"}  # enzyme moiety; S + ES + P broken by P's own ddt term
    for row in prepared.conservation:
        assert abs(row @ out) < 1e-12


def test_conservation_rows_are_left_null_vectors():
    # invented network with two moieties (A-group and B-group)
    model = {"states": {n: 1.0 for n in ("A", "B", "AB", "A2", "B2")},
             "reactions": [{"equation": "A + B <=> AB", "k": 1, "k_reverse": 1},
                           {"equation": "2 A -> A2", "k": 1}, {"equation": "B2 -> 2 B", "k": 1}]}
    prepared = prepare(model)
    assert prepared.conservation.shape == (2, 5)
    assert np.all(prepared.conservation @ prepared.stoichiometry == 0)
    assert np.all(prepared.conservation == np.round(prepared.conservation))


def test_structural_rates_agree_with_the_symbolic_jacobian_on_a_mixed_network():
    """The right-hand side runs reactions structurally; the Jacobian comes from the trees.
    Central differences of the one must match the other (invented network)."""
    model = {"states": {"A": 0.7, "B": 0.4, "C": 0.3, "D": 0.2, "T": 400.0, "W": {"initial": 2.0, "clamped": True}},
             "parameters": {"k1": 0.3, "Ea": 20.0},
             "derived": {"kd": "k1 * exp(-1000/T)"},
             "ddt": {"T": "-0.01*(T - 390)", "A": "0.05*step(t - 1)"},
             "reactions": [{"equation": "A + B -> C", "k": "k1"},                # parameter
                           {"equation": "2 C <=> D", "k": 1.5, "k_reverse": 0.25},  # constants
                           {"equation": "B + W -> A", "k": "kd"},                # derived expression
                           {"equation": "D -> ", "arrhenius": {"A": 50.0, "Ea": "Ea", "Ea_unit": "kJ/mol", "T": "T"}},
                           {"equation": "0.5 A -> B", "k": 0.2},                 # fractional order
                           {"equation": " -> C", "rate": "0.01*if(t > 2, 1, 0)"}]}
    with pytest.raises(Exception):
        prepare(model)  # Ea must be a number
    model["reactions"][3]["arrhenius"]["Ea"] = 20.0
    prepared = prepare(model)
    y = np.array([0.7, 0.4, 0.3, 0.2, 400.0, 2.0])
    for t in (0.5, 3.0):
        k = prepared.kernel
        J = np.zeros((6, 6))
        vm.jac_dense(k, t, y, prepared.p, np.zeros(k.n_regs), np.zeros(len(k.jac_rows)), J)
        for j in range(6):
            h = 1e-6 * max(1.0, y[j])
            e = np.zeros(6)
            e[j] = h
            fd = (rhs(prepared, y + e, t=t) - rhs(prepared, y - e, t=t)) / (2 * h)
            np.testing.assert_allclose(J[:, j], fd, rtol=1e-6, atol=1e-9)
    out = rhs(prepared, y, t=3.0)
    assert out[5] == 0.0
    r1, r2 = 0.3 * 0.7 * 0.4, 1.5 * 0.3 ** 2 - 0.25 * 0.2
    r3 = 0.3 * math.exp(-1000 / 400.0) * 0.4 * 2.0
    r4 = 50.0 * math.exp(-20e3 / (8.314462618 * 400.0)) * 0.2
    r5, r6 = 0.2 * 0.7 ** 0.5, 0.01
    np.testing.assert_allclose(out, [0.05 - r1 + r3 - 0.5 * r5, -r1 - r3 + r5, r1 - 2 * r2 + r6,
                                     r2 - r4, -0.1, 0.0], rtol=1e-13)
