"""The model field: valid models load unchanged; errors are nested by path."""
from __future__ import annotations

import json
from pathlib import Path

import pytest
from marshmallow import Schema, ValidationError

from engine.language.check import ModelIssue
from schemas.model import ModelField, issues_to_messages

MODELS = Path(__file__).resolve().parents[2] / "examples" / "models"


class Holder(Schema):
    model = ModelField(required=True)


def errors_for(model):
    with pytest.raises(ValidationError) as info:
        Holder().load({"model": model})
    return info.value.messages["model"]


def test_example_models_load_unchanged():
    for path in MODELS.glob("*.json"):
        model = json.loads(path.read_text())
        assert Holder().load({"model": model}) == {"model": model}


def test_expression_errors_are_keyed_by_path_with_position_and_hint():
    model = {"states": {"A": 1.0}, "parameters": {"k_f": 1.0}, "ddt": {"A": "-kf*A"}}
    assert errors_for(model) == {"ddt": {"A": ["position 1: unknown name 'kf'; did you mean 'k_f'?"]}}


def test_reaction_errors_use_list_indices():
    model = {"states": {"A": 1.0}, "reactions": [{"equation": "A -> B", "k": 1},
                                                 {"equation": "A -> ", "k": "nope"}]}
    messages = errors_for(model)
    assert set(messages["reactions"]) == {0, 1}
    assert "unknown species 'B'" in messages["reactions"][0]["equation"][0]
    assert "unknown name 'nope'" in messages["reactions"][1]["k"][0]


@pytest.mark.parametrize("bad", [float("nan"), float("inf"), -float("inf")])
def test_non_finite_numbers_are_rejected(bad):
    messages = errors_for({"states": {"A": bad}, "parameters": {"k": {"value": bad}}})
    assert messages["states"]["A"] == ["must be a finite number"]
    assert messages["parameters"]["k"]["value"] == ["must be a finite number"]


def test_unknown_keys_and_wrong_types():
    assert "unknown key" in errors_for({"states": {"A": 1}, "odes": {}})["odes"][0]
    assert errors_for([1]) == ["must be an object with 'states' and 'ddt' and/or 'reactions'"]


def test_leaf_and_prefix_paths_nest_without_loss():
    issues = [ModelIssue(("reactions", 0), "give exactly one of ..."),
              ModelIssue(("reactions", 0, "k_reverse"), "is required"), ModelIssue((), "whole")]
    assert issues_to_messages(issues) == {
        "reactions": {0: {"_schema": ["give exactly one of ..."], "k_reverse": ["is required"]}},
        "_schema": ["whole"]}
