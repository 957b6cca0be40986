"""The ``model`` object of a job spec: a marshmallow field that checks the whole
model language by calling the model language (``engine.language.check.check_model``; no numba).

Errors are raised as one ``ValidationError`` whose messages are nested by the
path inside the model, e.g. ``{"ddt": {"A": ["position 7: unknown name 'kf';
did you mean 'k_f'?"]}}`` or ``{"reactions": {3: {"equation": [...]}}}``, so the
job schema can turn them into JSON pointers such as ``/model/ddt/A``. Problems
with the model object as a whole sit under ``"_schema"``.
"""
from __future__ import annotations

from marshmallow import ValidationError, fields

from engine.language.check import ModelIssue, check_model
from engine.language.expr import ExprError
from engine.language.limits import Limits

SCHEMA_KEY = "_schema"


def issues_to_messages(issues: list[ModelIssue]) -> dict:
    """Nest issue texts by path; a path that is both a leaf and a prefix keeps its
    own messages under ``"_schema"``."""
    messages: dict = {}
    for issue in issues:
        node = messages
        path = list(issue.path) or [SCHEMA_KEY]
        for key in path[:-1]:
            child = node.get(key)
            if isinstance(child, list):
                child = node[key] = {SCHEMA_KEY: child}
            node = node.setdefault(key, {})
        leaf = path[-1]
        if isinstance(node.get(leaf), dict):
            node[leaf].setdefault(SCHEMA_KEY, []).append(issue.text())
        else:
            node.setdefault(leaf, []).append(issue.text())
    return messages


def _expression_type_issues(model: dict) -> list[ModelIssue]:
    """Places where the model language wants an expression written as a string (ddt, derived,
    events' when) and got another JSON type; the engine's reader takes a bare number there."""
    issues = []
    for section in ("ddt", "derived"):
        entries = model.get(section)
        if isinstance(entries, dict):
            for name, value in entries.items():
                if not isinstance(value, str):
                    issues.append(ModelIssue((section, name), _not_a_string(value)))
    events = model.get("events")
    if isinstance(events, list):
        for k, event in enumerate(events):
            if isinstance(event, dict) and "when" in event and not isinstance(event["when"], str):
                issues.append(ModelIssue(("events", k, "when"), _not_a_string(event["when"])))
    return issues


def _not_a_string(value) -> str:
    kind = {bool: "a boolean", int: "a number", float: "a number", dict: "an object",
            list: "a list", type(None): "null"}.get(type(value), "not a string")
    example = f' (write "{value!r}" for a constant)' if type(value) in (int, float) else ""
    return f"must be an expression written as a string, got {kind}{example}"


class ModelField(fields.Field):
    """A model in the Stifflane model language (see docs/model-language.md)."""

    def __init__(self, limits: Limits | None = None, **kwargs):
        kwargs.setdefault("metadata", {}).setdefault(
            "description", "the model: states, parameters, derived, ddt, reactions, events "
                           "(see docs/model-language.md)")
        super().__init__(**kwargs)
        self.limits = limits

    def _deserialize(self, value, attr, data, **kwargs):
        if not isinstance(value, dict):
            raise ValidationError("must be an object with 'states' and 'ddt' and/or 'reactions'")
        try:
            typed = _expression_type_issues(value)
            issues = typed + [i for i in check_model(value, self.limits)
                              if i.path not in {t.path for t in typed}]
        except ExprError as e:  # a reader path that let one escape: still a problem of the model
            raise ValidationError({SCHEMA_KEY: [f"the model cannot be prepared: {e.message}"]})
        if issues:
            raise ValidationError(issues_to_messages(issues))
        return value

    def _serialize(self, value, attr, obj, **kwargs):
        return value
