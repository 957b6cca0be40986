"""check(): every refusal names its field (and row), and a good problem has none."""
from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from calibration.problem import Experiment, Noise, Problem, Unknown, check, count_points, sigmas

MODEL = {"states": {"A": 1.0, "B": 0.0}, "parameters": {"k": 0.5, "k_back": 0.1},
         "ddt": {"A": "-k*A + k_back*B", "B": "k*A - k_back*B"}, "derived": {"total": "A + B"}}
T = np.array([0.0, 1.0, 2.0, 4.0])


def good(**kw) -> Problem:
    e = Experiment("run1", (0.0, 5.0), T, {"a": np.array([1.0, 0.6, 0.4, 0.2])})
    base = dict(model=MODEL, experiments=(e,), observables={"a": "A"}, noise={"a": Noise(absolute=0.01)},
                unknowns=(Unknown("k", 0.01, 10.0, start=1.0),))
    base.update(kw)
    return Problem(**base)


def experiment(**kw) -> Experiment:
    base = dict(name="run1", span=(0.0, 5.0), times=T, observed={"a": np.array([1.0, 0.6, 0.4, 0.2])})
    base.update(kw)
    return Experiment(**base)


def issues(problem) -> dict:
    return {i.path: i.message for i in check(problem)}


def test_a_good_problem_has_no_issues_and_counts_its_points():
    p = good(observables={"a": "A", "t": "total"},
             experiments=(experiment(observed={"a": np.array([1.0, np.nan, 0.4, 0.2]),
                                               "t": np.array([1.0, 1.0, np.nan, np.nan])}),))
    assert check(p) == []
    assert count_points(p) == 5


@pytest.mark.parametrize("change, path, words", [
    (dict(observables={"a": "AA"}), ("observables", "a"), "neither a state nor a derived"),
    (dict(observables={}), ("observables",), "at least one observable"),
    (dict(noise={"b": Noise(absolute=1.0)}), ("noise", "b"), "unknown observable"),
    (dict(noise={"a": Noise(absolute=-1.0)}), ("noise", "a", "absolute"), ">= 0"),
    (dict(unknowns=()), ("unknowns",), "at least one"),
    (dict(unknowns=(Unknown("kk", 0.1, 1.0),)), ("unknowns", 0, "name"), "unknown parameter 'kk'"),
    (dict(unknowns=(Unknown("init:C", 0.1, 1.0),)), ("unknowns", 0, "name"), "unknown state 'C'"),
    (dict(unknowns=(Unknown("k", 0.1, 1.0), Unknown("k", 0.1, 1.0))), ("unknowns", 1, "name"), "named twice"),
    (dict(unknowns=(Unknown("k", 2.0, 1.0),)), ("unknowns", 0, "upper"), "crossed"),
    (dict(unknowns=(Unknown("k", 0.0, 1.0),)), ("unknowns", 0, "lower"), "positive lower bound"),
    (dict(unknowns=(Unknown("k", 0.1, 1.0, start=3.0),)), ("unknowns", 0, "start"), "outside the bounds"),
    (dict(unknowns=(Unknown("k", 0.1, float("inf")),)), ("unknowns", 0, "upper"), "finite"),
    (dict(unknowns=(Unknown("k", 0.1, 1.0, scale="ln"),)), ("unknowns", 0, "scale"), "log, linear"),
    (dict(parameters={"k": 1.0}), ("parameters", "k"), "estimated"),
    (dict(parameters={"q": 1.0}), ("parameters", "q"), "unknown parameter"),
    (dict(method="euler"), ("method",), "unknown method"),
    (dict(rtol=0.0), ("rtol",), "positive"),
    (dict(max_evaluations=0), ("max_evaluations",), "positive"),
    (dict(model={"states": {"A": 1}, "ddt": {"A": "-k*"}}), ("model", "ddt", "A"), ""),
])
def test_problem_level_issues_name_their_field(change, path, words):
    found = issues(good(**change))
    assert path in found, found
    assert words in found[path]


@pytest.mark.parametrize("change, path, words", [
    (dict(times=np.array([0.0, 1.0, 2.0, 6.0])), ("experiments", 0, "times", 3), "outside the span"),
    (dict(times=np.array([0.0, 2.0, 1.0, 4.0])), ("experiments", 0, "times", 2), "sorted"),
    (dict(times=np.array([0.0, np.nan, 1.0, 4.0])), ("experiments", 0, "times", 1), "finite"),
    (dict(span=(5.0, 1.0)), ("experiments", 0, "span"), "end after the start"),
    (dict(observed={"a": np.array([1.0, np.inf, 0.4, 0.2])}), ("experiments", 0, "observed", "a", 1), "finite"),
    (dict(observed={"b": np.array([1.0, 0.6, 0.4, 0.2])}), ("experiments", 0, "observed", "b"), "unknown observable"),
    (dict(observed={"a": np.array([1.0, 0.6])}), ("experiments", 0, "observed", "a"), "2 values for 4 times"),
    (dict(observed={}), ("experiments", 0, "observed"), "no measurements"),
    (dict(observed={"a": np.full(4, np.nan)}), ("experiments", 0, "observed"), "every cell is empty"),
    (dict(sigma={"a": np.array([np.nan, 0.0, 0.1, 0.1])}), ("experiments", 0, "sigma", "a", 1), "positive"),
    (dict(sigma={"a": np.array([np.nan, -1.0, 0.1, 0.1])}), ("experiments", 0, "sigma", "a", 1), "positive"),
    (dict(sigma={"a": np.array([np.nan, np.inf, 0.1, 0.1])}), ("experiments", 0, "sigma", "a", 1), "positive"),
    (dict(initial={"C": 1.0}), ("experiments", 0, "initial", "C"), "unknown state"),
    (dict(parameters={"k": 2.0}), ("experiments", 0, "parameters", "k"), "estimated"),
    (dict(parameters={"k_back": float("nan")}), ("experiments", 0, "parameters", "k_back"), "finite"),
])
def test_experiment_issues_name_experiment_field_and_row(change, path, words):
    found = issues(good(experiments=(experiment(**change),)))
    assert path in found, found
    assert words in found[path]


def test_relative_noise_on_a_zero_reading_is_a_zero_sigma_at_that_row():
    p = good(noise={"a": Noise(relative=0.05)},
             experiments=(experiment(observed={"a": np.array([1.0, 0.0, 0.4, 0.2])}),))
    found = issues(p)
    assert "sigma is zero" in found[("experiments", 0, "observed", "a", 1)]
    weighted = dataclasses.replace(p, noise={"a": Noise(absolute=0.001, relative=0.05)})
    assert check(weighted) == []
    np.testing.assert_allclose(sigmas(weighted, weighted.experiments[0], "a"),
                               np.sqrt(0.001 ** 2 + (0.05 * np.array([1.0, 0.0, 0.4, 0.2])) ** 2))


def test_an_estimated_initial_value_may_not_also_be_set_by_an_experiment():
    p = good(unknowns=(Unknown("init:A", 0.1, 2.0),), experiments=(experiment(initial={"A": 1.0}),))
    assert "estimated" in issues(p)[("experiments", 0, "initial", "A")]


def test_more_unknowns_than_measurements():
    p = good(unknowns=(Unknown("k", 0.1, 1.0), Unknown("k_back", 0.1, 1.0)),
             experiments=(experiment(times=np.array([1.0]), observed={"a": np.array([0.6])}),))
    assert "2 unknowns but only 1 measurements" in issues(p)[("unknowns",)]


def test_names_get_suggestions_and_duplicate_experiment_names_are_refused():
    found = issues(good(unknowns=(Unknown("kback", 0.1, 1.0),)))
    assert "k_back" in found[("unknowns", 0, "name")]
    e = experiment()
    assert "named twice" in issues(good(experiments=(e, e)))[("experiments", 1, "name")]
