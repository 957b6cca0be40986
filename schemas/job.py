"""Job spec v1: the JSON a client posts to create an integration job.

Unknown fields are rejected everywhere; non-finite numbers are rejected
(JSON has no NaN or Infinity, and the API's JSON reader refuses those tokens).
Expression checks live in the model field (schemas/model.py), so every error
comes back keyed by its path and becomes a JSON pointer in the problem document.
"""
from __future__ import annotations

import math

import numpy as np
from marshmallow import Schema, ValidationError, fields, validate, validates_schema

from engine.choices import MACHINE_CODE_MODES, METHODS
from schemas.model import ModelField
from schemas.problem import close_names, did_you_mean

MAX_OUTPUT_POINTS = 100_000
UNKNOWN = "Unknown field."  # marshmallow's words, rewritten by SpecSchema
REQUIRED = "Missing data for required field."


class SpecSchema(Schema):
    """Base of every spec schema (job, batch and their parts): errors say what to do.

    An unknown field names the known field it is probably meant to be ('tspan': did you mean
    'span'?) or lists the fields there are; a required field that such a near-namesake explains
    is not reported a second time (one root cause, one error); "is required" in plain words."""

    error_messages = {"type": "must be a JSON object"}

    def handle_error(self, error: ValidationError, data, **kwargs):
        messages = error.messages
        if not isinstance(messages, dict) or not isinstance(data, dict):
            return
        known = [f.data_key or name for name, f in self.load_fields.items()]
        meant = set()
        for key, value in list(messages.items()):
            if value == [UNKNOWN]:
                close = close_names(key, [k for k in known if k not in data])
                if close:
                    meant.update(close[:1])
                    messages[key] = [f"unknown field '{key}'" + did_you_mean(key, close)]
                else:
                    messages[key] = [f"unknown field '{key}'; the fields here are "
                                     + ", ".join(f"'{k}'" for k in known)]
        for key, value in list(messages.items()):
            if value == [REQUIRED]:
                if key in meant:
                    del messages[key]  # the unknown near-namesake above says it
                else:
                    messages[key] = ["is required"]


class Choice(validate.OneOf):
    """One of fixed words; a near miss gets a did-you-mean ('radau' -> 'radau_iia_5')."""

    def __call__(self, value):
        try:
            return super().__call__(value)
        except ValidationError:
            words = ", ".join(f"'{c}'" for c in self.choices)
            close = close_names(value, self.choices) if isinstance(value, str) else []
            if isinstance(value, str) and not close:  # a prefix: 'radau' for 'radau_iia_5'
                close = [c for c in self.choices if c.startswith(value) and value][:3]
            hint = (" or ".join(f"'{c}'" for c in close)) if close else ""
            raise ValidationError(f"must be one of {words}" + (f"; did you mean {hint}?" if hint else ""))


def is_bare_model(spec) -> bool:
    """A model posted where a job spec belongs: states and equations at the top, no 'model'."""
    return (isinstance(spec, dict) and "model" not in spec and "states" in spec
            and any(k in spec for k in ("ddt", "reactions", "parameters", "derived", "events", "title")))


BARE_MODEL = ("this is a model, not a job spec: put it under \"model\" and say the time span to "
              "integrate over, e.g. {\"model\": {\"states\": ..., \"ddt\": ...}, \"span\": [0, 10]} "
              "(optional: output, tolerance, method; examples/jobs/ has complete specs)")


class FiniteFloat(fields.Float):
    """A float that refuses NaN and +-Infinity, and booleans posing as numbers."""

    def __init__(self, **kwargs):
        super().__init__(allow_nan=False, **kwargs)

    def _deserialize(self, value, attr, data, **kwargs):
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise ValidationError("must be a number")
        out = super()._deserialize(value, attr, data, **kwargs)
        if not math.isfinite(out):
            raise ValidationError("must be a finite number")
        return out


class StrictInteger(fields.Integer):
    """An integer; a JSON number with no fractional part (``5.0``) is one too, as in JSON Schema."""

    def __init__(self, **kwargs):
        super().__init__(strict=True, **kwargs)

    def _deserialize(self, value, attr, data, **kwargs):
        if isinstance(value, bool):
            raise ValidationError("must be an integer")
        if isinstance(value, float) and value.is_integer() and abs(value) < 2 ** 63:
            value = int(value)
        return super()._deserialize(value, attr, data, **kwargs)


class StrictBoolean(fields.Boolean):
    """JSON true or false only: "yes", "true", 1 and 0 are refused, not read as booleans."""

    MESSAGE = "must be true or false (a JSON boolean)"

    def __init__(self, **kwargs):
        kwargs.setdefault("error_messages", {}).setdefault("null", self.MESSAGE)
        super().__init__(**kwargs)

    def _deserialize(self, value, attr, data, **kwargs):
        if not isinstance(value, bool):
            raise ValidationError(self.MESSAGE)
        return value


def numbers_by_name(value: dict, number: fields.Field) -> dict:
    """{name: number} read with ``number``; every bad entry reported under its own name."""
    errors, out = {}, {}
    for name, v in value.items():
        try:
            out[name] = number.deserialize(v)
        except ValidationError as e:
            errors[name] = e.messages
    if errors:
        raise ValidationError(errors)
    return out


class Overrides(fields.Dict):
    """{name: finite number}; an error points at the name (/parameters/k), not at marshmallow's
    inner /parameters/k/value."""

    def __init__(self, **kwargs):
        super().__init__(keys=fields.String(), values=FiniteFloat(), **kwargs)

    def _deserialize(self, value, attr, data, **kwargs):
        if not isinstance(value, dict):
            raise ValidationError("must be an object of name: number")
        return numbers_by_name(value, FiniteFloat())


# Below this, the error weights atol + rtol|y| of states near zero overflow the error norms of
# float64 (their squares pass 1e308); no physical quantity is resolved that finely.
MIN_ATOL = 1e-60


class AbsoluteTolerance(fields.Field):
    """A positive number for every state, or {state: number} with an optional "*" default."""

    def _deserialize(self, value, attr, data, **kwargs):
        number = FiniteFloat(validate=validate.Range(min=MIN_ATOL, error=f"must be at least {MIN_ATOL:g}"))
        if isinstance(value, dict):
            return numbers_by_name(value, number)
        try:
            return number.deserialize(value)
        except ValidationError:
            raise ValidationError(f"must be a number of at least {MIN_ATOL:g}, or an object of such "
                                  "numbers keyed by state name (\"*\" for the rest)")


class OutputSchema(SpecSchema):
    """Where results are reported: explicit times, or a count with spacing."""

    times = fields.List(FiniteFloat(), validate=validate.Length(min=1, max=MAX_OUTPUT_POINTS))
    count = StrictInteger(validate=validate.Range(min=2, max=MAX_OUTPUT_POINTS))
    spacing = fields.String(validate=Choice(["linear", "log"]), load_default="linear")
    first = FiniteFloat(validate=validate.Range(min=0, min_inclusive=False),
                        metadata={"description": "log spacing: first output time after the start, "
                                                 "as an offset from span[0] (default 1e-6 of the span)"})

    @validates_schema
    def _one_way(self, data, **kwargs):
        if ("times" in data) == ("count" in data):
            raise ValidationError("give exactly one of 'times' or 'count'", "_schema")
        if "times" in data and any(b <= a for a, b in zip(data["times"], data["times"][1:])):
            raise ValidationError("must be strictly increasing", "times")


class ToleranceSchema(SpecSchema):
    rtol = FiniteFloat(validate=validate.Range(min=1e-13, max=0.1), load_default=1e-6,
                       metadata={"description": "relative tolerance, 1e-13 to 0.1"})
    atol = AbsoluteTolerance(load_default=1e-10, metadata={
        "description": "absolute tolerance: a number, or {state: number, \"*\": default}",
        "oneOf": [{"type": "number"}, {"type": "object", "additionalProperties": {"type": "number"}}]})


class LimitsSchema(SpecSchema):
    max_steps = StrictInteger(validate=validate.Range(min=1, max=100_000_000), load_default=1_000_000)
    max_wall_seconds = FiniteFloat(validate=validate.Range(min=0.01, max=86_400), load_default=600.0)


MAX_SENSITIVITIES = 100  # parameters and initial values together
# outputs a job may rank its sensitivity parameters by (calibration.ranking computes them)
RANK_SUMMARIES = ("at", "final", "max", "integral", "crossing")
RANK_DIRECTIONS = ("both", "rising", "falling")
MAX_RANK_OUTPUTS = 20


class RankOutputSchema(SpecSchema):
    """One output to rank the sensitivity parameters by: a summary of one state."""

    state = fields.String(required=True, metadata={"description": "the state the output is read from"})
    summary = fields.String(required=True, validate=Choice(RANK_SUMMARIES), metadata={
        "description": "at: the state at time t; final: at the last output time; max: its largest "
                       "value; integral: trapezoid over the output times; crossing: the delay from "
                       "the span's start until it first passes value"})
    t = FiniteFloat(metadata={"description": "summary 'at': the time (within the span)"})
    value = FiniteFloat(metadata={"description": "summary 'crossing': the value the state passes"})
    direction = fields.String(validate=Choice(RANK_DIRECTIONS), metadata={
        "description": "summary 'crossing': count passages upwards (rising), downwards (falling) or "
                       "either (both, the default)"})

    @validates_schema(skip_on_field_errors=True)
    def _needs(self, data, **kwargs):
        summary = data["summary"]
        if summary == "at" and "t" not in data:
            raise ValidationError("is required for summary 'at': the time to read the state at", "t")
        if summary == "crossing" and "value" not in data:
            raise ValidationError("is required for summary 'crossing': the value the state passes", "value")
        for name, owner in (("t", "at"), ("value", "crossing"), ("direction", "crossing")):
            if name in data and summary != owner:
                raise ValidationError(f"only for summary '{owner}', not '{summary}'", name)


class SensitivitySchema(SpecSchema):
    parameters = fields.List(fields.String(), load_default=list, validate=validate.Length(max=MAX_SENSITIVITIES),
                             metadata={"description": "parameters θ whose sensitivities dy/dθ the result carries"})
    initial = fields.List(fields.String(), load_default=list, validate=validate.Length(max=MAX_SENSITIVITIES),
                          metadata={"description": "states whose initial values are θ too (labelled init:<state>)"})
    error_control = StrictBoolean(load_default=True, metadata={
        "description": "let the sensitivities steer the step size like the states (default); false "
                       "carries them along at the states' steps"})
    rank = fields.List(fields.Nested(RankOutputSchema), validate=validate.Length(max=MAX_RANK_OUTPUTS),
                       metadata={"description": "outputs to rank the parameters and initial values by "
                                                "normalised sensitivity d ln(output) / d ln θ, signed; the "
                                                "result carries the ranking in sensitivity.ranking"})

    @validates_schema(skip_on_field_errors=True)
    def _some(self, data, **kwargs):
        if not data["parameters"] and not data["initial"]:
            raise ValidationError("name at least one parameter or initial value", "parameters")
        if len(data["parameters"]) + len(data["initial"]) > MAX_SENSITIVITIES:
            raise ValidationError(f"at most {MAX_SENSITIVITIES} parameters and initial values together",
                                  "parameters")


class JobSpecSchema(SpecSchema):
    """Job spec v1."""

    label = fields.String(validate=validate.Length(max=200), metadata={"description": "free text shown in lists"})
    model = ModelField(required=True, metadata={
        "type": "object", "required": ["states"],
        "description": "the model: states, parameters, derived, ddt, reactions, events "
                       "(see docs/model-language.md)"})
    parameters = Overrides(load_default=dict,
                           metadata={"description": "overrides of the model's parameter values"})
    initial = Overrides(load_default=dict, metadata={"description": "overrides of the model's initial values"})
    span = fields.List(FiniteFloat(), required=True, validate=validate.Length(equal=2),
                       metadata={"description": "[t_start, t_end], t_end > t_start"})
    output = fields.Nested(OutputSchema, load_default=lambda: {"count": 101, "spacing": "linear"})
    tolerance = fields.Nested(ToleranceSchema, load_default=lambda: ToleranceSchema().load({}))
    method = fields.String(validate=Choice(METHODS), load_default="auto")
    machine_code = fields.String(
        validate=Choice(MACHINE_CODE_MODES), load_default="auto",
        metadata={"description": "translate the model's right-hand side and Jacobian into machine "
                                 "code (about 5x faster per evaluation; 0.1-0.5 s to compile once per "
                                 "model, kept on disk): 'auto' compiles for batches and for models "
                                 "solved before, 'always', or 'never' (the interpreter)"})
    limits = fields.Nested(LimitsSchema, load_default=lambda: LimitsSchema().load({}))
    nonnegative = StrictBoolean(load_default=False,
                                 metadata={"description": "keep every state >= 0 (concentrations)"})
    sensitivity = fields.Nested(SensitivitySchema, metadata={
        "description": "forward sensitivities dy/dθ at the output times, raw and normalised "
                       "(d ln y / d ln θ), for the named parameters and initial values"})

    def handle_error(self, error: ValidationError, data, **kwargs):
        if is_bare_model(data) and isinstance(error.messages, dict):
            error.messages.clear()  # one root cause instead of a line per model section
            error.messages["_schema"] = [BARE_MODEL]
            return
        super().handle_error(error, data, **kwargs)

    @validates_schema(skip_on_field_errors=False)
    def _consistent(self, data, **kwargs):
        # Runs even when fields failed, so every input here may be partial or malformed.
        errors: dict = {}
        span = data.get("span")
        if not (isinstance(span, list) and len(span) == 2):
            span = None
        if span and span[1] <= span[0]:
            errors["span"] = ["t_end must be greater than t_start"]
        elif span and not math.isfinite(span[1] - span[0]):
            errors["span"] = [f"the span's length {span[1]:g} - ({span[0]:g}) overflows float64; "
                              "shift the time origin or shorten the span"]
        out = data.get("output") if isinstance(data.get("output"), dict) else {}
        if span and span[1] > span[0] and out.get("times"):
            if out["times"][0] < span[0] or out["times"][-1] > span[1]:
                errors.setdefault("output", {})["times"] = [f"all output times must lie in the span {span}"]
        if span and span[1] > span[0] and out.get("first") is not None and out["first"] >= span[1] - span[0]:
            errors.setdefault("output", {})["first"] = ["must be smaller than the span's length"]
        model = data.get("model")
        if isinstance(model, dict):
            states = set(model.get("states") or {}) if isinstance(model.get("states"), dict) else set()
            params = set(model.get("parameters") or {}) if isinstance(model.get("parameters"), dict) else set()
            for name in data.get("initial") or {}:
                if name not in states:
                    errors.setdefault("initial", {})[name] = [f"'{name}' is not a state of the model"
                                                              + did_you_mean(name, states)]
            for name in data.get("parameters") or {}:
                if name not in params:
                    errors.setdefault("parameters", {})[name] = [f"'{name}' is not a parameter of the model"
                                                                 + did_you_mean(name, params)]
            sens = data.get("sensitivity")
            if isinstance(sens, dict):
                for section, table, what in (("parameters", params, "parameter"), ("initial", states, "state")):
                    names = sens.get(section) if isinstance(sens.get(section), list) else []
                    for pos, name in enumerate(names):
                        if isinstance(name, str) and name not in table:
                            errors.setdefault("sensitivity", {}).setdefault(section, {})[pos] = [
                                f"'{name}' is not a {what} of the model" + did_you_mean(name, table)]
                        elif isinstance(name, str) and name in names[:pos]:
                            errors.setdefault("sensitivity", {}).setdefault(section, {})[pos] = [
                                f"'{name}' is named twice"]
                ranked = sens.get("rank") if isinstance(sens.get("rank"), list) else []
                wrong: dict = {}
                for pos, item in enumerate(ranked):
                    if not isinstance(item, dict):
                        continue
                    name, at = item.get("state"), item.get("t")
                    if isinstance(name, str) and name not in states:
                        wrong.setdefault(pos, {})["state"] = [f"'{name}' is not a state of the model"
                                                              + did_you_mean(name, states)]
                    if span and span[1] > span[0] and isinstance(at, float) and not span[0] <= at <= span[1]:
                        wrong.setdefault(pos, {})["t"] = [f"must lie in the span {span}"]
                if wrong:
                    errors.setdefault("sensitivity", {})["rank"] = wrong
            tolerance = data.get("tolerance")
            atol = tolerance.get("atol") if isinstance(tolerance, dict) else None
            if isinstance(atol, dict):
                for name in atol:
                    if name != "*" and name not in states:
                        errors.setdefault("tolerance", {}).setdefault("atol", {})[name] = [
                            f"'{name}' is not a state of the model" + did_you_mean(name, states)]
        if errors:
            raise ValidationError(errors)


def describe_model(model: dict) -> dict:
    """Facts about a valid model (names, counts, stoichiometry, conservation laws), from the
    model language alone: sizes are checked first, nothing is differentiated or compiled."""
    from engine.language.check import describe

    return describe(model)


def output_times(span: list[float], output: dict) -> np.ndarray:
    """The output times a loaded spec asks for."""
    t0, t1 = span
    if "times" in output:
        return np.asarray(output["times"], dtype=float)
    n = output["count"]
    if output.get("spacing") == "log":
        first = output.get("first") or (t1 - t0) * 1e-6
        return np.concatenate([[t0], t0 + np.geomspace(first, t1 - t0, n - 1)])
    return np.linspace(t0, t1, n)


def atol_vector(atol, state_names: tuple[str, ...]) -> np.ndarray:
    if isinstance(atol, dict):
        default = atol.get("*", 1e-10)
        return np.array([atol.get(name, default) for name in state_names], dtype=float)
    return np.full(len(state_names), float(atol))
