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

from marshmallow import ValidationError, fields, validate, validates_schema

from sweeps import sampling, summaries
from schemas.job import Choice, FiniteFloat, JobSpecSchema, SpecSchema, StrictInteger
from schemas.problem import close_names, did_you_mean

TARGETS = ("parameters", "initial")
MAX_SUMMARIES = 50
MAX_GRID_POINTS = 20_001


class RangeSchema(SpecSchema):
    """Evenly spaced values of one grid axis."""

    from_ = FiniteFloat(required=True, data_key="from")
    to = FiniteFloat(required=True)
    count = StrictInteger(required=True, validate=validate.Range(min=1, max=100_000))
    spacing = fields.String(validate=Choice(["linear", "log"]), load_default="linear")

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


class DistributionSchema(SpecSchema):
    distribution = fields.String(required=True, validate=Choice(sampling.DISTRIBUTIONS))
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


MemberSchema = SpecSchema.from_dict(_by_target(FiniteFloat()), name="MemberSchema")
GridSchema = SpecSchema.from_dict(_by_target(AxisField()), name="GridSchema")


class SampleSchema(SpecSchema.from_dict(_by_target(fields.Nested(DistributionSchema)), name="SampleBase")):
    count = StrictInteger(required=True, validate=validate.Range(min=1))
    seed = StrictInteger(required=True, validate=validate.Range(min=0, max=2 ** 63 - 1))
    method = fields.String(validate=Choice(sampling.METHODS), load_default="random")


class SummarySchema(SpecSchema):
    name = fields.String(validate=validate.Regexp(r"^[A-Za-z_][A-Za-z0-9_.]{0,63}$"))
    kind = fields.String(required=True, validate=Choice(summaries.KINDS))
    of = fields.String(metadata={"description": "a state or derived quantity (all kinds but event)"})
    event = fields.String(metadata={"description": "kind event: an event name of the model"})
    time = FiniteFloat(metadata={"description": "kind at: the time"})
    level = FiniteFloat(metadata={"description": "kind crossing: the threshold"})
    when = fields.String(validate=Choice(summaries.WHEN), metadata={
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


class SummaryGridSchema(SpecSchema):
    count = StrictInteger(validate=validate.Range(min=2, max=MAX_GRID_POINTS), load_default=1001)
    spacing = fields.String(validate=Choice(["linear", "log"]), load_default="linear")


class BatchSpecSchema(SpecSchema):
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

    @validates_schema(skip_on_field_errors=False, pass_original=True)
    def _consistent(self, data, original_data=None, **kwargs):
        """Every problem in one answer, as for jobs: runs even when fields failed, so names are
        read from the spec as sent (``original_data``) wherever the loaded value is missing."""
        raw = original_data if isinstance(original_data, dict) else {}
        errors: dict = {}
        ways = [k for k in ("members", "grid", "sample") if k in raw]
        if len(ways) > 1:
            errors["_schema"] = [f"give exactly one of 'members', 'grid' or 'sample' (got {', '.join(ways)})"]
        elif not ways and not any(close_names(k, ("members", "grid", "sample")) for k in raw
                                  if k not in self.load_fields):  # else the unknown field says it
            errors["_schema"] = ["give exactly one of 'members', 'grid' or 'sample'"]
        base = raw.get("base") if isinstance(raw.get("base"), dict) else {}
        if "sensitivity" in base:  # not silently dropped: members do not carry sensitivities yet
            errors.setdefault("base", {})["sensitivity"] = [
                "sensitivities are computed for single jobs; submit the members that need them as jobs"]
        model = base.get("model")
        names = _model_names(model) if isinstance(model, dict) and isinstance(model.get("states"), dict) else None
        span = _partial(lambda: data["base"]["span"])
        span = span if isinstance(span, list) and len(span) == 2 and span[0] < span[1] else None
        if names is not None:
            if len(ways) == 1:
                _check_names(raw, ways[0], names, errors)
            _check_summaries(raw.get("summaries"), names, span, errors)
        columns = _partial(lambda: summaries.columns(data["summaries"]))  # the summaries that loaded
        if columns and len(set(columns)) != len(columns):
            errors.setdefault("summaries", {}).setdefault("_schema", []).append(
                "summary names must be unique; give 'name' to tell them apart")
        n = _partial(lambda: member_count(data)) if len(ways) == 1 and ways[0] in data else None
        if n is not None:  # (with a part of the design refused: the members of the rest)
            if n > self.max_members:
                errors.setdefault(ways[0], {}).setdefault("_schema", []).append(
                    f"{n} members; at most {self.max_members} allowed")
            values = _partial(lambda: n * _output_points(data["base"]["output"])
                              * len(data["base"]["model"]["states"])) if data.get("trajectories") else None
            if values is not None:
                if values > self.max_trajectory_values:
                    errors["trajectories"] = [
                        f"{values} trajectory values (members x output points x states); at most "
                        f"{self.max_trajectory_values}: fewer output points or no trajectories"]
        if errors:
            raise ValidationError(errors)


def _partial(compute):
    """A figure from loaded data that may be partial (a field refused): None when it cannot be had."""
    try:
        return compute()
    except (KeyError, TypeError, AttributeError, IndexError):
        return None


def _output_points(output: dict) -> int:
    return len(output["times"]) if "times" in output else output["count"]


def _names(section) -> set:
    return {k for k in section if isinstance(k, str)} if isinstance(section, dict) else set()


def _model_names(model: dict):
    """(states, parameters, derived, events) of a model as sent (any part may be malformed)."""
    events = model.get("events")
    events = events if isinstance(events, list) else []
    return (_names(model.get("states")), _names(model.get("parameters")), _names(model.get("derived")),
            {ev.get("name", f"event{k + 1}") for k, ev in enumerate(events) if isinstance(ev, dict)})


def _check_names(raw: dict, way: str, names, errors: dict) -> None:
    states, params, _, _ = names
    known = {"parameters": (params, "parameter"), "initial": (states, "state")}
    given = raw.get(way)
    if way == "members":
        blocks = list(enumerate(given)) if isinstance(given, list) else []
    else:
        blocks = [(None, given)]
    for i, block in blocks:
        if not isinstance(block, dict):
            continue
        for target in TARGETS:
            for name in _names(block.get(target)):
                choices, what = known[target]
                if name not in choices:
                    node = errors.setdefault(way, {})
                    if i is not None:
                        node = node.setdefault(i, {})
                    node.setdefault(target, {})[name] = [
                        f"'{name}' is not a {what} of the base model" + did_you_mean(name, choices)]
    if (way == "sample" and isinstance(given, dict) and not _names(given.get("parameters"))
            and not _names(given.get("initial"))):
        errors.setdefault("sample", {}).setdefault("_schema", []).append("give at least one distribution")


def _check_summaries(specs, names, span, errors: dict) -> None:
    states, _, derived, events = names
    for i, s in enumerate(specs if isinstance(specs, list) else []):
        if not isinstance(s, dict):
            continue
        bad = {}
        if isinstance(s.get("of"), str) and s["of"] not in states | derived:
            bad["of"] = [f"'{s['of']}' is not a state or derived quantity of the base model"
                         + did_you_mean(s["of"], states | derived)]
        if isinstance(s.get("event"), str) and s["event"] not in events:
            bad["event"] = [f"'{s['event']}' is not an event of the base model" + did_you_mean(s["event"], events)]
        time = s.get("time")
        if (span and isinstance(time, (int, float)) and not isinstance(time, bool) and math.isfinite(time)
                and not span[0] <= time <= span[1]):
            bad["time"] = [f"must lie in the span {span}"]
        for key, text in bad.items():
            errors.setdefault("summaries", {}).setdefault(i, {}).setdefault(key, []).extend(text)


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
