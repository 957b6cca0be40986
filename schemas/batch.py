"""Batch spec v1: one base job and its variations, and the summaries to tabulate.

Exactly one of ``members`` (explicit list), ``grid`` (cartesian product) or
``sample`` (random or Latin hypercube, seeded) says how the members differ from
``base``. Every name is checked against the base model, every value is finite,
and the member count is capped (``max_members``), so a batch that is accepted
can run. Members are never expanded here: :func:`design_of` returns the compact
definition that sweeps/sampling.py turns into member values by index.
"""
from __future__ import annotations

import math

from marshmallow import Schema, ValidationError, fields, validate, validates_schema

from sweeps import sampling, summaries
from schemas.job import FiniteFloat, JobSpecSchema, StrictInteger

TARGETS = ("parameters", "initial")
MAX_SUMMARIES = 50
MAX_GRID_POINTS = 20_001


class RangeSchema(Schema):
    """Evenly spaced values of one grid axis."""

    from_ = FiniteFloat(required=True, data_key="from")
    to = FiniteFloat(required=True)
    count = StrictInteger(required=True, validate=validate.Range(min=1, max=100_000))
    spacing = fields.String(validate=validate.OneOf(["linear", "log"]), load_default="linear")

    @validates_schema
    def _log_positive(self, data, **kwargs):
        if data.get("spacing") == "log" and (data["from_"] <= 0 or data["to"] <= 0):
            raise ValidationError("log spacing needs positive 'from' and 'to'", "_schema")


class AxisField(fields.Field):
    """A grid axis: a list of numbers, or {from, to, count, spacing}."""

    def _deserialize(self, value, attr, data, **kwargs):
        if isinstance(value, list):
            if not 1 <= len(value) <= 100_000:
                raise ValidationError("give 1 to 100000 values")
            return fields.List(FiniteFloat()).deserialize(value)
        if isinstance(value, dict):
            out = RangeSchema().load(value)
            return {"from": out["from_"], "to": out["to"], "count": out["count"],
                    "spacing": out["spacing"]}
        raise ValidationError("must be a list of numbers or {from, to, count, spacing}")


class DistributionSchema(Schema):
    distribution = fields.String(required=True, validate=validate.OneOf(sampling.DISTRIBUTIONS))
    low = FiniteFloat()
    high = FiniteFloat()
    mean = FiniteFloat()
    std = FiniteFloat(validate=validate.Range(min=0, min_inclusive=False))

    @validates_schema
    def _params(self, data, **kwargs):
        kind = data.get("distribution")
        needs = {"uniform": ("low", "high"), "log_uniform": ("low", "high"),
                 "normal": ("mean", "std"), "truncated_normal": ("mean", "std", "low", "high")}[kind]
        missing = {k: ["is required for " + kind] for k in needs if k not in data}
        extra = {k: [f"does not apply to {kind}"] for k in ("low", "high", "mean", "std")
                 if k in data and k not in needs}
        if missing or extra:
            raise ValidationError({**missing, **extra})
        if "low" in data and data["high"] <= data["low"]:
            raise ValidationError("must be greater than 'low'", "high")
        if kind == "log_uniform" and data["low"] <= 0:
            raise ValidationError("must be positive for log_uniform", "low")


class NameMap(fields.Field):
    """{name: value}; errors are keyed by the name itself (JSON pointer /.../name)."""

    def __init__(self, value_field: fields.Field, **kwargs):
        kwargs.setdefault("load_default", dict)
        super().__init__(**kwargs)
        self.value_field = value_field

    def _deserialize(self, value, attr, data, **kwargs):
        if not isinstance(value, dict):
            raise ValidationError("must be an object keyed by name")
        out, errors = {}, {}
        for name, v in value.items():
            try:
                out[name] = self.value_field.deserialize(v)
            except ValidationError as e:
                errors[name] = e.messages
        if errors:
            raise ValidationError(errors)
        return out

    def _serialize(self, value, attr, obj, **kwargs):
        return value


def _by_target(values):
    return {t: NameMap(values) for t in TARGETS}


MemberSchema = Schema.from_dict(_by_target(FiniteFloat()), name="MemberSchema")
GridSchema = Schema.from_dict(_by_target(AxisField()), name="GridSchema")


class SampleSchema(Schema.from_dict(_by_target(fields.Nested(DistributionSchema)), name="SampleBase")):
    count = StrictInteger(required=True, validate=validate.Range(min=1))
    seed = StrictInteger(required=True, validate=validate.Range(min=0, max=2 ** 63 - 1))
    method = fields.String(validate=validate.OneOf(sampling.METHODS), load_default="random")


class SummarySchema(Schema):
    name = fields.String(validate=validate.Regexp(r"^[A-Za-z_][A-Za-z0-9_.]{0,63}$"))
    kind = fields.String(required=True, validate=validate.OneOf(summaries.KINDS))
    of = fields.String(metadata={"description": "a state or derived quantity (all kinds but event)"})
    event = fields.String(metadata={"description": "kind event: an event name of the model"})
    time = FiniteFloat(metadata={"description": "kind at: the time"})
    level = FiniteFloat(metadata={"description": "kind crossing: the threshold"})
    when = fields.String(validate=validate.OneOf(summaries.WHEN), metadata={
        "description": "kind crossing: first time the value is at or 'above' / 'below' the level"})

    @validates_schema
    def _fields_of_kind(self, data, **kwargs):
        kind = data.get("kind")
        needs = {"event": ("event",), "at": ("of", "time"), "crossing": ("of", "level", "when")}.get(kind, ("of",))
        missing = {k: [f"is required for kind {kind}"] for k in needs if k not in data}
        extra = {k: [f"does not apply to kind {kind}"] for k in ("of", "event", "time", "level", "when")
                 if k in data and k not in needs}
        if missing or extra:
            raise ValidationError({**missing, **extra})


class SummaryGridSchema(Schema):
    count = StrictInteger(validate=validate.Range(min=2, max=MAX_GRID_POINTS), load_default=1001)
    spacing = fields.String(validate=validate.OneOf(["linear", "log"]), load_default="linear")


class BatchSpecSchema(Schema):
    """Batch spec v1."""

    label = fields.String(validate=validate.Length(max=200))
    base = fields.Nested(JobSpecSchema, required=True, metadata={"description": "the job every member starts from"})
    members = fields.List(fields.Nested(MemberSchema), validate=validate.Length(min=1))
    grid = fields.Nested(GridSchema)
    sample = fields.Nested(SampleSchema)
    summaries = fields.List(fields.Nested(SummarySchema), required=True,
                            validate=validate.Length(min=1, max=MAX_SUMMARIES))
    summary_grid = fields.Nested(SummaryGridSchema, load_default=lambda: SummaryGridSchema().load({}))
    trajectories = fields.Boolean(load_default=False, metadata={
        "description": "also keep every member's states at the base output times (size-capped)"})
    chunk_size = StrictInteger(validate=validate.Range(min=1, max=2000), metadata={
        "description": "members per unit of work (default from the server's settings)"})

    def __init__(self, *args, max_members: int = 100_000, max_trajectory_values: int = 5_000_000, **kw):
        super().__init__(*args, **kw)
        self.max_members = max_members
        self.max_trajectory_values = max_trajectory_values

    @validates_schema(skip_on_field_errors=True)
    def _consistent(self, data, **kwargs):
        ways = [k for k in ("members", "grid", "sample") if k in data]
        if len(ways) != 1:
            raise ValidationError("give exactly one of 'members', 'grid' or 'sample'", "_schema")
        model = data["base"]["model"]
        errors: dict = {}
        _check_names(data, ways[0], model, errors)
        _check_summaries(data["summaries"], model, data["base"]["span"], errors)
        if errors:
            raise ValidationError(errors)
        n = member_count(data)
        if n > self.max_members:
            raise ValidationError(f"{n} members; at most {self.max_members} allowed", ways[0])
        if data["trajectories"]:
            out = data["base"]["output"]
            points = len(out["times"]) if "times" in out else out["count"]
            values = n * points * len(model.get("states", {}))
            if values > self.max_trajectory_values:
                raise ValidationError(f"{values} trajectory values (members x output points x states); "
                                      f"at most {self.max_trajectory_values}: fewer output points or "
                                      "no trajectories", "trajectories")


def _model_names(model):
    states = set(model.get("states", {}))
    params = set(model.get("parameters", {}))
    derived = set(model.get("derived", {}))
    events = {ev.get("name", f"event{k + 1}") for k, ev in enumerate(model.get("events", []))}
    return states, params, derived, events


def _check_names(data, way, model, errors):
    states, params, _, _ = _model_names(model)
    known = {"parameters": params, "initial": states}
    blocks = (list(enumerate(data["members"])) if way == "members" else [(None, data[way])])
    for i, block in blocks:
        for target in TARGETS:
            for name in block[target]:
                if name not in known[target]:
                    what = "parameter" if target == "parameters" else "state"
                    node = errors.setdefault(way, {})
                    if i is not None:
                        node = node.setdefault(i, {})
                    node.setdefault(target, {})[name] = [f"'{name}' is not a {what} of the base model"]
    if way == "sample" and not (data["sample"]["parameters"] or data["sample"]["initial"]):
        errors.setdefault("sample", {})["_schema"] = ["give at least one distribution"]


def _check_summaries(specs, model, span, errors):
    states, _, derived, events = _model_names(model)
    for i, s in enumerate(specs):
        bad = {}
        if "of" in s and s["of"] not in states | derived:
            bad["of"] = [f"'{s['of']}' is not a state or derived quantity of the base model"]
        if "event" in s and s["event"] not in events:
            bad["event"] = [f"'{s['event']}' is not an event of the base model"]
        if "time" in s and not span[0] <= s["time"] <= span[1]:
            bad["time"] = [f"must lie in the span {span}"]
        if bad:
            errors.setdefault("summaries", {})[i] = bad
    names = summaries.columns(specs)
    if len(set(names)) != len(names):
        errors.setdefault("summaries", {}).setdefault("_schema", []).append(
            "summary names must be unique; give 'name' to tell them apart")


def member_count(data: dict) -> int:
    """Members of a loaded spec (without generating them)."""
    if "members" in data:
        return len(data["members"])
    if "sample" in data:
        return data["sample"]["count"]
    axes = [a for t in TARGETS for a in data["grid"][t].values()]
    return math.prod(len(a) if isinstance(a, list) else a["count"] for a in axes)


def design_of(data: dict) -> dict:
    """The compact design of a loaded spec (see sweeps/sampling.py), columns in the order given."""
    if "members" in data:
        columns = []
        for m in data["members"]:
            for t in TARGETS:
                for name in m[t]:
                    if (t, name) not in columns:
                        columns.append((t, name))
        rows = [[m[t].get(name, math.nan) for t, name in columns] for m in data["members"]]
        return {"kind": "list", "columns": columns, "rows": rows}
    if "grid" in data:
        g = data["grid"]
        columns = [(t, name) for t in TARGETS for name in g[t]]
        axes = [sampling.axis_values(g[t][name]).tolist() for t, name in columns]
        return {"kind": "grid", "columns": columns, "axes": axes}
    s = data["sample"]
    columns = [(t, name) for t in TARGETS for name in s[t]]
    return {"kind": "sample", "columns": columns, "count": s["count"], "seed": s["seed"],
            "method": s["method"], "distributions": [dict(s[t][name]) for t, name in columns]}
