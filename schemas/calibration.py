"""Calibration spec v1: a model, experiments with their measurements, and the unknowns to fit.

Strict like the job and batch specs (schemas/job.py, schemas/batch.py): unknown fields are
refused with a did-you-mean, numbers must be finite, every name is checked against the model,
and every problem comes back in one answer as a JSON pointer (``/experiments/0/data/3/B``).
Measurements arrive as JSON rows (``{"t": 1.5, "A": 0.31, "B": null}``) or as CSV text
(``"t,A,B\\n1.5,0.31,\\n"``); an empty cell (or null) is a missing value: skipped and
counted, never an error. A problem in CSV text points at the ``csv`` field and names the
line and the column in its detail.

:func:`problem_of` turns a loaded spec into the numerics' ``calibration.problem.Problem``
(imported lazily: only numpy dataclasses and the model language, no compiled kernels).
"""
from __future__ import annotations

import csv
import io
import math

from dataclasses import dataclass, field

from marshmallow import Schema, ValidationError, fields, validate, validates_schema

from engine.choices import MACHINE_CODE_MODES, METHODS
from schemas.batch import NameMap
from schemas.job import MIN_ATOL, Choice, FiniteFloat, Overrides, SpecSchema, StrictInteger
from schemas.model import ModelField
from schemas.problem import did_you_mean

INITIAL_PREFIX = "init:"
TIME_COLUMNS = ("t", "time")
OBSERVABLE_NAME = r"^[A-Za-z_][A-Za-z0-9_.]{0,63}$"
MAX_OBSERVABLES = 100
MAX_EXPERIMENTS = 1000       # hard caps of the document; the server's settings may be lower
MAX_UNKNOWNS = 100
MAX_STARTS = 200
MAX_EVALUATIONS = 5000
MAX_CSV_COLUMNS = MAX_OBSERVABLES + 1
SCALES = ("log", "linear")
CAUTION = ("Estimates are only as good as the model and the data. The intervals assume that the model "
           "is right and that the measurement errors are independent. Have a qualified person check "
           "them before any design or dosing decision.")


def _number_or_null(value) -> bool:
    return value is None or (isinstance(value, (int, float)) and not isinstance(value, bool))


class RowField(fields.Field):
    """One measurement row: {"t": number, "<observable>": number or null}; errors by column."""

    def __init__(self, what: str = "measurement", **kwargs):
        super().__init__(**kwargs)
        self.what = what

    def _deserialize(self, value, attr, data, **kwargs):
        if not isinstance(value, dict):
            raise ValidationError('must be an object like {"t": 1.5, "A": 0.3}')
        errors = {}
        t = value.get("t")
        if "t" not in value:
            errors["t"] = ["is required: the time of this row"]
        elif t is None or not _number_or_null(t):
            errors["t"] = ["must be a number"]
        for name, v in value.items():
            if name == "t":
                continue
            if not _number_or_null(v):
                errors[name] = [f"must be a number, or null for a missing value (got {_kind(v)})"]
            elif v is not None and not math.isfinite(float(v)):
                errors[name] = ["must be a finite number"]
        if errors:
            raise ValidationError(errors)
        return {k: (float(v) if v is not None else None) for k, v in value.items()}

    def _serialize(self, value, attr, obj, **kwargs):
        return value


def _kind(v) -> str:
    return {bool: "a boolean", str: f"the text {str(v)[:20]!r}", dict: "an object", list: "a list"}.get(
        type(v), type(v).__name__)


class CalibrationToleranceSchema(SpecSchema):
    rtol = FiniteFloat(validate=validate.Range(min=1e-13, max=0.1), load_default=1e-8,
                       metadata={"description": "relative tolerance of every solve, 1e-13 to 0.1"})
    atol = FiniteFloat(validate=validate.Range(min=MIN_ATOL, error=f"must be at least {MIN_ATOL:g}"),
                       load_default=1e-12, metadata={"description": "absolute tolerance of every solve"})


class NoiseSchema(SpecSchema):
    absolute = FiniteFloat(validate=validate.Range(min=0), load_default=0.0,
                           metadata={"description": "absolute standard deviation, in the observable's unit"})
    relative = FiniteFloat(validate=validate.Range(min=0), load_default=0.0,
                           metadata={"description": "relative standard deviation (0.05 = 5 % of |value|)"})


class ExperimentSchema(SpecSchema):
    name = fields.String(required=True, validate=validate.Regexp(r"^[ -~]{1,64}$", error=(
        "must be 1 to 64 printable ASCII characters")))
    span = fields.List(FiniteFloat(), required=True, validate=validate.Length(equal=2),
                       metadata={"description": "[t_start, t_end] of this experiment's solve"})
    initial = Overrides(load_default=dict, metadata={"description": "initial values of this experiment"})
    parameters = Overrides(load_default=dict, metadata={
        "description": "parameter values of this experiment (conditions); not an unknown"})
    data = fields.List(RowField(), validate=validate.Length(min=1), metadata={
        "description": "measurement rows: {\"t\": time, \"<observable>\": value or null (missing)}"})
    csv = fields.String(validate=validate.Length(min=1), metadata={
        "description": "measurements as CSV text: a header 't,<observable>,...', one row per time; "
                       "empty cells are missing values (skipped and counted); '#' starts a comment line"})
    sigma = fields.List(RowField(), validate=validate.Length(min=1), metadata={
        "description": "optional per-point standard deviations, one row per data row (same t), "
                       "null where the observable's noise model applies"})

    @validates_schema
    def _one_way(self, data, **kwargs):
        if ("data" in data) == ("csv" in data):
            raise ValidationError("give exactly one of 'data' (rows) or 'csv' (text)", "_schema")


class UnknownSchema(SpecSchema):
    name = fields.String(required=True, metadata={"description": "a parameter, or init:<state>"})
    lower = FiniteFloat(required=True)
    upper = FiniteFloat(required=True)
    start = FiniteFloat(metadata={"description": "the first start's value (default: the middle of the "
                                                 "bounds in the scale)"})
    scale = fields.String(validate=Choice(SCALES), load_default="log",
                          metadata={"description": "log (positive bounds; rate constants) or linear"})


class CalibrationSpecSchema(SpecSchema):
    """Calibration spec v1."""

    label = fields.String(validate=validate.Length(max=200), metadata={"description": "free text shown in lists"})
    model = ModelField(required=True, metadata={
        "type": "object", "required": ["states"],
        "description": "the model: states, parameters, derived, ddt, reactions, events (docs/model-language.md)"})
    tolerance = fields.Nested(CalibrationToleranceSchema, load_default=lambda: CalibrationToleranceSchema().load({}))
    method = fields.String(validate=Choice(METHODS), load_default="auto")
    machine_code = fields.String(validate=Choice(MACHINE_CODE_MODES), load_default="auto")
    max_evaluations = StrictInteger(validate=validate.Range(min=1, max=MAX_EVALUATIONS), load_default=200,
                                    metadata={"description": "residual evaluations per start, at most"})
    experiments = fields.List(fields.Nested(ExperimentSchema), required=True,
                              validate=validate.Length(min=1, max=MAX_EXPERIMENTS))
    observables = fields.Dict(keys=fields.String(validate=validate.Regexp(OBSERVABLE_NAME)),
                              values=fields.String(), required=True,
                              validate=validate.Length(min=1, max=MAX_OBSERVABLES), metadata={
                                  "description": "observable name -> the state or derived quantity it measures"})
    noise = NameMap(fields.Nested(NoiseSchema), metadata={
        "description": "observable -> {absolute, relative}: sigma = sqrt(absolute^2 + (relative*|y|)^2); "
                       "an observable without one is unweighted (absolute 1)"})
    unknowns = fields.List(fields.Nested(UnknownSchema), required=True,
                           validate=validate.Length(min=1, max=MAX_UNKNOWNS))
    known = Overrides(load_default=dict, metadata={
        "description": "parameters held at these values in every experiment (not estimated)"})
    starts = StrictInteger(validate=validate.Range(min=1, max=MAX_STARTS), load_default=10, metadata={
        "description": "optimiser starts: the given start values, then a Latin hypercube in the bounds"})
    seed = StrictInteger(validate=validate.Range(min=0, max=2 ** 63 - 1), load_default=0)

    def __init__(self, *args, limits: "Limits | None" = None, **kw):
        super().__init__(*args, **kw)
        self.limits = limits or Limits()

    @validates_schema(skip_on_field_errors=False, pass_original=True)
    def _consistent(self, data, original_data=None, **kwargs):
        """Names against the model, bounds, measurements against spans and observables, the
        server's limits: every problem in one answer, read from the spec as sent where a field
        did not load."""
        raw = original_data if isinstance(original_data, dict) else {}
        errors: dict = {}
        _check(raw, data, self.limits, errors)
        if errors:
            raise ValidationError(errors)


@dataclass(frozen=True)
class Limits:
    """The server's limits (jobs/settings.py), below the document's hard caps."""
    rows: int = 20_000
    experiments: int = 100
    unknowns: int = 20
    starts: int = MAX_STARTS

    @classmethod
    def of(cls, settings) -> "Limits":
        return cls(rows=settings.max_calibration_rows, experiments=settings.max_calibration_experiments,
                   unknowns=settings.max_calibration_unknowns, starts=settings.max_calibration_starts)


# ---- measurements -----------------------------------------------------------------------

@dataclass
class Table:
    """One experiment's measurements as rows, in the order given."""
    rows: list                     # [{"t": float, obs: float | None}]
    columns: list                  # observable columns, in order
    lines: list = field(default_factory=list)   # CSV: the text line of each row (from 1)
    errors: list = field(default_factory=list)  # [(line, column, message)] from reading CSV
    skipped: int = 0               # missing cells
    header_line: int = 1           # CSV: the line of the header


def read_csv(text: str, max_rows: int) -> Table:
    """Rows of CSV text: a header with a time column ('t' or 'time') and observable columns.
    Blank lines and lines starting with '#' are skipped; an empty cell is a missing value."""
    table = Table([], [])
    reader = csv.reader(io.StringIO(text))
    header = None
    try:
        for record in reader:
            line = reader.line_num
            if not record or all(not c.strip() for c in record) or record[0].lstrip().startswith("#"):
                continue
            cells = [c.strip() for c in record]
            if header is None:
                header = cells
                table.header_line = line
                if len(header) > MAX_CSV_COLUMNS:
                    table.errors.append((line, None, f"{len(header)} columns; at most {MAX_CSV_COLUMNS}"))
                    return table
                times = [k for k, c in enumerate(header) if c in TIME_COLUMNS]
                if not times:
                    table.errors.append((line, None, "the header needs a time column 't' (or 'time'), "
                                                     f"e.g. 't,A,B'; got {','.join(header)[:80]!r}"))
                    return table
                for k, c in enumerate(header):
                    if not c:
                        table.errors.append((line, k + 1, "a column has no name"))
                    elif header.index(c) != k:
                        table.errors.append((line, c, "the column is named twice"))
                table.columns = [c for k, c in enumerate(header) if k != times[0] and c]
                time_col = times[0]
                continue
            if len(table.rows) >= max_rows:
                table.errors.append((line, None, f"more than {max_rows} measurement rows"))
                return table
            if len(cells) > len(header):
                table.errors.append((line, None, f"{len(cells)} cells but the header has {len(header)} columns"))
                continue
            row = {}
            for k, name in enumerate(header):
                cell = cells[k] if k < len(cells) else ""
                column = "t" if k == time_col else name
                if not name:
                    continue
                if cell == "":
                    if k == time_col:
                        table.errors.append((line, header[k], "the time is missing"))
                    row[column] = None
                    continue
                try:
                    value = float(cell)
                except ValueError:
                    table.errors.append((line, header[k], f"{cell[:20]!r} is not a number"))
                    continue
                if not math.isfinite(value):
                    table.errors.append((line, header[k], f"{cell[:20]!r} is not a finite number; leave the "
                                                          "cell empty for a missing value"))
                    continue
                row[column] = value
            if row.get("t") is not None:
                table.rows.append(row)
                table.lines.append(line)
    except csv.Error as e:
        table.errors.append((reader.line_num, None, f"not readable as CSV: {e}"))
    if header is None and not table.errors:
        table.errors.append((1, None, "no header line: start with 't,<observable>,...'"))
    return table


def table_of(experiment: dict, max_rows: int) -> Table | None:
    """The measurements of a loaded (or raw) experiment, or None when they cannot be read."""
    if isinstance(experiment.get("csv"), str):
        return read_csv(experiment["csv"], max_rows)
    rows = experiment.get("data")
    if not isinstance(rows, list):
        return None
    good = [r for r in rows if isinstance(r, dict)]
    columns = []
    for r in good:
        for k in r:
            if k != "t" and k not in columns:
                columns.append(k)
    return Table(rows, columns)


# ---- the checks of _consistent -------------------------------------------------------------

def _names(section) -> set:
    return {k for k in section if isinstance(k, str)} if isinstance(section, dict) else set()


def _number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _add(errors: dict, path: tuple, message: str) -> None:
    node = errors
    for key in path[:-1]:
        child = node.get(key)
        if isinstance(child, list):
            child = node[key] = {"_schema": child}
        node = node.setdefault(key, {})
    leaf = path[-1]
    if isinstance(node.get(leaf), dict):
        node[leaf].setdefault("_schema", []).append(message)
    else:
        node.setdefault(leaf, []).append(message)


def _check(raw: dict, data: dict, limits: Limits, errors: dict) -> None:
    model = raw.get("model") if isinstance(raw.get("model"), dict) else None
    states, params = (_names(model.get("states")), _names(model.get("parameters"))) if model else (None, None)
    derived = _names(model.get("derived")) if model else None
    observables = raw.get("observables") if isinstance(raw.get("observables"), dict) else {}
    obs_names = set(observables)
    for name in ("t", "time"):
        if name in obs_names:
            _add(errors, ("observables", name), f"'{name}' names the time column; call the observable otherwise")
    if states is not None:
        for name, target in observables.items():
            if isinstance(target, str) and target not in states | derived:
                _add(errors, ("observables", name), f"'{target}' is not a state or derived quantity of the "
                     "model" + did_you_mean(target, states | derived))
    noise = raw.get("noise") if isinstance(raw.get("noise"), dict) else {}
    for name, spec in noise.items():
        if name not in obs_names:
            _add(errors, ("noise", name), f"'{name}' is not an observable" + did_you_mean(name, obs_names))
        elif isinstance(spec, dict) and all(_number(spec.get(k, 0.0)) and spec.get(k, 0.0) == 0
                                            for k in ("absolute", "relative")):
            _add(errors, ("noise", name), "gives sigma 0 (zero sigma): give 'absolute', 'relative' or both above 0")
    unknowns = raw.get("unknowns") if isinstance(raw.get("unknowns"), list) else []
    if len(unknowns) > limits.unknowns:
        _add(errors, ("unknowns",), f"{len(unknowns)} unknowns; at most {limits.unknowns} allowed")
    estimated: dict = {}
    for j, u in enumerate(unknowns):
        if not isinstance(u, dict):
            continue
        name = u.get("name")
        if isinstance(name, str) and states is not None:
            if name.startswith(INITIAL_PREFIX):
                state = name[len(INITIAL_PREFIX):]
                if state not in states:
                    _add(errors, ("unknowns", j, "name"), f"'{state}' is not a state of the model"
                         + did_you_mean(state, states))
            elif name not in params:
                _add(errors, ("unknowns", j, "name"), f"'{name}' is not a parameter of the model (or "
                     "init:<state> for an initial value)" + did_you_mean(name, params))
        if isinstance(name, str):
            if name in estimated:
                _add(errors, ("unknowns", j, "name"), f"'{name}' is estimated twice (also unknowns/{estimated[name]})")
            estimated.setdefault(name, j)
        lo, hi, start = u.get("lower"), u.get("upper"), u.get("start")
        if _number(lo) and _number(hi):
            if hi <= lo:
                _add(errors, ("unknowns", j, "upper"), f"must be greater than lower ({lo:g}): the bounds are crossed")
            elif u.get("scale", "log") == "log" and lo <= 0:
                _add(errors, ("unknowns", j, "lower"), "must be positive on a log scale (or give scale 'linear')")
            elif _number(start) and not lo <= start <= hi:
                _add(errors, ("unknowns", j, "start"), f"must lie within the bounds [{lo:g}, {hi:g}]")
    known = raw.get("known") if isinstance(raw.get("known"), dict) else {}
    for name in known:
        if params is not None and name not in params:
            _add(errors, ("known", name), f"'{name}' is not a parameter of the model" + did_you_mean(name, params))
        elif name in estimated:
            _add(errors, ("known", name), f"'{name}' is estimated (unknowns/{estimated[name]}): a parameter is "
                 "either known or estimated")
    starts = raw.get("starts")
    if _number(starts) and starts > limits.starts:
        _add(errors, ("starts",), f"{starts:g} starts; at most {limits.starts} allowed")
    experiments = raw.get("experiments") if isinstance(raw.get("experiments"), list) else []
    if len(experiments) > limits.experiments:
        _add(errors, ("experiments",), f"{len(experiments)} experiments; at most {limits.experiments} allowed")
        return
    points = _check_experiments(experiments, states, params, obs_names, noise, estimated, limits, errors)
    if points == 0 and experiments and "experiments" not in errors:
        _add(errors, ("experiments",), "no measured value in any experiment: every cell is empty")
    elif points and len(unknowns) > points:
        _add(errors, ("unknowns",), f"{len(unknowns)} unknowns but only {points} measured values: "
             "more parameters than data points cannot be estimated")


def _check_experiments(experiments, states, params, obs_names, noise, estimated, limits, errors) -> int:
    seen, points, rows_left = {}, 0, limits.rows
    for i, e in enumerate(experiments):
        if not isinstance(e, dict):
            continue
        name = e.get("name")
        if isinstance(name, str):
            if name in seen:
                _add(errors, ("experiments", i, "name"), f"'{name}' is the name of experiments/{seen[name]} too")
            seen.setdefault(name, i)
        span = e.get("span")
        span = span if isinstance(span, list) and len(span) == 2 and all(_number(v) for v in span) else None
        if span and span[1] <= span[0]:
            _add(errors, ("experiments", i, "span"), "t_end must be greater than t_start")
            span = None
        for section, table, what in (("initial", states, "state"), ("parameters", params, "parameter")):
            for key in _names(e.get(section)):
                if table is not None and key not in table:
                    _add(errors, ("experiments", i, section, key), f"'{key}' is not a {what} of the model"
                         + did_you_mean(key, table))
                label = INITIAL_PREFIX + key if section == "initial" else key
                if label in estimated:
                    _add(errors, ("experiments", i, section, key), f"'{label}' is estimated "
                         f"(unknowns/{estimated[label]}); an experiment cannot set it")
        table = table_of(e, rows_left + 1)
        if table is None:
            continue
        where = "csv" if isinstance(e.get("csv"), str) else "data"
        for line, column, message in table.errors:
            _add(errors, ("experiments", i, "csv"), _at(line, column) + message)
        if len(table.rows) > rows_left:
            place = _at(table.lines[rows_left], None) if table.lines else f"row {rows_left}: "
            _add(errors, ("experiments", i, where), place + f"more than {limits.rows} measurement rows in all "
                 "experiments together; send fewer rows (thin the data) or split the calibration")
            rows_left = 0
            continue
        rows_left -= len(table.rows)
        points += _check_rows(i, e, table, where, span, obs_names, noise, errors)
    return points


def _at(line, column) -> str:
    col = f", column {column!r}" if isinstance(column, str) else f", column {column}" if column else ""
    return f"line {line}{col}: "


def _check_rows(i, e, table: Table, where, span, obs_names, noise, errors) -> int:
    """Rows within the span, columns that are observables, sigma; returns the measured values."""
    def point(r, column, message):
        if where == "csv":
            _add(errors, ("experiments", i, "csv"), _at(table.lines[r], column) + message)
        else:
            _add(errors, ("experiments", i, "data", r, column), message)

    unknown = [c for c in table.columns if c not in obs_names]
    for c in unknown:
        if obs_names:
            r = next((k for k, row in enumerate(table.rows) if isinstance(row, dict) and c in row), 0)
            if where == "csv":
                _add(errors, ("experiments", i, "csv"), _at(table.header_line, c)
                     + f"'{c}' is not an observable" + did_you_mean(c, obs_names))
            else:
                point(r, c, f"'{c}' is not an observable" + did_you_mean(c, obs_names))
    measured = [c for c in table.columns if c in obs_names]
    if not measured and not unknown and not table.errors:
        _add(errors, ("experiments", i, where), "no observable columns: each row needs 't' and at least one "
             "of " + ", ".join(f"'{o}'" for o in sorted(obs_names)))
    points = 0
    for r, row in enumerate(table.rows):
        if not isinstance(row, dict):
            continue
        t = row.get("t")
        if span and _number(t) and not span[0] <= t <= span[1]:
            point(r, "t", f"time {t:g} is outside the experiment's span [{span[0]:g}, {span[1]:g}]")
        for c in measured:
            v = row.get(c)
            if not _number(v):
                continue
            points += 1
            n = noise.get(c) if isinstance(noise.get(c), dict) else None
            if n and v == 0 and n.get("absolute", 0) == 0 and _number(n.get("relative", 0)) and not _sigma_at(e, r, c):
                point(r, c, f"sigma is 0 here: the noise of '{c}' is relative only and the value is 0; "
                            "give 'absolute' too, or a sigma for this point")
    sigma = e.get("sigma")
    if isinstance(sigma, list):
        if len(sigma) != len(table.rows):
            _add(errors, ("experiments", i, "sigma"), f"{len(sigma)} rows but the data has {len(table.rows)}: "
                 "give one sigma row per data row (null where the noise model applies)")
        for r, (srow, drow) in enumerate(zip(sigma, table.rows)):
            if not isinstance(srow, dict) or not isinstance(drow, dict):
                continue
            if _number(srow.get("t")) and _number(drow.get("t")) and srow["t"] != drow["t"]:
                _add(errors, ("experiments", i, "sigma", r, "t"), f"is {srow['t']:g} but data row {r} has "
                     f"t = {drow['t']:g}")
            for c, s in srow.items():
                if c == "t" or s is None:
                    continue
                if c not in measured:
                    _add(errors, ("experiments", i, "sigma", r, c), f"'{c}' is not a measured observable of "
                         "this experiment" + did_you_mean(c, measured))
                elif _number(s) and s <= 0:
                    _add(errors, ("experiments", i, "sigma", r, c), f"must be positive (got {s:g}): a zero or "
                         "negative sigma is no standard deviation")
    return points


def _sigma_at(e: dict, r: int, c: str) -> bool:
    sigma = e.get("sigma")
    if not isinstance(sigma, list) or r >= len(sigma) or not isinstance(sigma[r], dict):
        return False
    return _number(sigma[r].get(c))


# ---- from a loaded spec to the numerics' problem ----------------------------------------

@dataclass
class Built:
    """The problem, facts about the data, and how to point back into the spec."""
    problem: object
    data: dict
    rows: list   # per experiment: (where, [spec row index of each sorted time], [csv line of each])


def problem_of(spec: dict) -> Built:
    """The ``calibration.problem.Problem`` of a loaded spec (times sorted; missing cells NaN)."""
    import numpy as np

    from calibration.problem import Experiment, Noise, Problem, Unknown

    observables = dict(spec["observables"])
    experiments, rowmaps, facts = [], [], []
    skipped_total = points_total = rows_total = 0
    for e in spec["experiments"]:
        table = table_of(e, 10 ** 9)
        order = sorted(range(len(table.rows)), key=lambda r: table.rows[r]["t"])
        times = np.array([table.rows[r]["t"] for r in order], dtype=float)
        measured = [c for c in table.columns if c in observables]
        observed, skipped = {}, 0
        for c in measured:
            values = np.array([np.nan if table.rows[r].get(c) is None else table.rows[r][c] for r in order])
            skipped += int(np.isnan(values).sum())
            observed[c] = values
        sigma = {}
        if e.get("sigma"):
            for c in measured:
                s = np.array([np.nan if e["sigma"][r].get(c) is None else e["sigma"][r][c] for r in order])
                if not np.isnan(s).all():
                    sigma[c] = s
        points = sum(int(np.isfinite(v).sum()) for v in observed.values())
        experiments.append(Experiment(name=e["name"], span=(float(e["span"][0]), float(e["span"][1])),
                                      times=times, observed=observed, sigma=sigma,
                                      initial=dict(e["initial"]), parameters=dict(e["parameters"])))
        rowmaps.append(("csv" if "csv" in e else "data", order, [table.lines[r] for r in order] if table.lines else []))
        facts.append({"name": e["name"], "rows": len(times), "points": points, "skipped_cells": skipped,
                      "observables": measured})
        skipped_total += skipped
        points_total += points
        rows_total += len(times)
    noise = {name: Noise(**n) for name, n in spec["noise"].items()}
    for name in observables:
        noise.setdefault(name, Noise(absolute=1.0))
    unknowns = tuple(Unknown(name=u["name"], lower=u["lower"], upper=u["upper"], start=u.get("start"),
                             scale=u["scale"]) for u in spec["unknowns"])
    problem = Problem(model=spec["model"], experiments=tuple(experiments), observables=observables,
                      noise=noise, unknowns=unknowns, parameters=dict(spec["known"]), rtol=spec["tolerance"]["rtol"],
                      atol=spec["tolerance"]["atol"], method=spec["method"],
                      max_evaluations=spec["max_evaluations"])
    data = {"experiments": facts, "rows": rows_total, "points": points_total, "skipped_cells": skipped_total}
    return Built(problem, data, rowmaps)


def issue_pointer(path: tuple, built: Built) -> tuple[str, str]:
    """(JSON pointer, detail prefix) in the spec for a path of ``calibration.problem.check``."""
    path = tuple(path)
    if len(path) >= 2 and path[0] == "experiments" and isinstance(path[1], int) and path[1] < len(built.rows):
        i = path[1]
        where, order, lines = built.rows[i]
        rest = path[2:]
        column = None
        k = None
        if rest and rest[0] == "times" and len(rest) > 1:
            column, k = "t", rest[1]
        elif rest and rest[0] in ("observed", "sigma") and len(rest) > 2:
            column, k = rest[1], rest[2]
            if rest[0] == "sigma":
                where = "sigma"
        if isinstance(k, int) and 0 <= k < len(order):
            if where == "csv":
                return f"/experiments/{i}/csv", _at(lines[k], column) if lines else ""
            return f"/experiments/{i}/{where}/{order[k]}/{_token(column)}", ""
        if rest and rest[0] in ("times", "observed", "sigma"):
            return f"/experiments/{i}/{where}", ""
    if path and path[0] == "parameters":  # the numerics' name of the spec's "known"
        path = ("known", *path[1:])
    return "/" + "/".join(_token(p) for p in path) if path else "/", ""


def _token(p) -> str:
    return str(p).replace("~", "~0").replace("/", "~1")


# ---- response shapes (nothing loads with these) ----------------------------------------

class CalibrationLinksSchema(Schema):
    self = fields.String()
    result = fields.String()
    spec = fields.String()
    cancel = fields.String()


class CalibrationProgressSchema(Schema):
    total = fields.Integer(required=True, metadata={"description": "starts"})
    done = fields.Integer(required=True, metadata={"description": "starts that ended converged or at their "
                                                                  "evaluation limit"})
    failed = fields.Integer(required=True, metadata={"description": "starts that ended failed"})
    cancelled = fields.Integer(required=True)
    lost = fields.Integer(required=True, metadata={"description": "starts whose worker died too often"})
    remaining = fields.Integer(required=True)
    fraction = fields.Float(required=True, metadata={"description": "finished starts / total, 0..1"})
    failed_solves = fields.Integer(required=True, metadata={
        "description": "solves that failed inside the optimiser (penalised, never fatal), over all starts"})
    best_sum_of_squares = fields.Float(allow_none=True, required=True, metadata={
        "description": "the smallest weighted sum of squares reached so far"})
    best_start = fields.Integer(allow_none=True, required=True)
    starts_per_second = fields.Float(allow_none=True, required=True)
    eta_seconds = fields.Float(allow_none=True, required=True)


class CalibrationViewSchema(Schema):
    id = fields.String(required=True)
    state = fields.String(required=True, metadata={"description": "queued, running, succeeded, failed or cancelled"})
    stage = fields.String(required=True, metadata={"description": "starts, summary (the estimate is being "
                                                                  "computed) or done"})
    label = fields.String()
    created_at = fields.String(allow_none=True, metadata={"description": "RFC 3339 UTC"})
    started_at = fields.String(allow_none=True)
    finished_at = fields.String(allow_none=True)
    cancel_requested = fields.Boolean()
    message = fields.String(allow_none=True, metadata={"description": "why it failed or was cancelled"})
    chunk_size = fields.Integer(metadata={"description": "starts per unit of work"})
    chunks = fields.Integer()
    unknowns = fields.List(fields.String())
    data = fields.Dict(metadata={"description": "rows, points (measured values), skipped_cells (empty cells), "
                                                "and the same per experiment"})
    progress = fields.Nested(CalibrationProgressSchema, required=True)
    links = fields.Nested(CalibrationLinksSchema)


class CalibrationPageSchema(Schema):
    items = fields.List(fields.Nested(CalibrationViewSchema), required=True)
    next_cursor = fields.String(allow_none=True, required=True)


class CalibrationCreatedSchema(Schema):
    id = fields.String(required=True)
    state = fields.String(required=True)
    starts = fields.Integer(required=True)
    data = fields.Dict(required=True)
    links = fields.Nested(CalibrationLinksSchema)


class EstimateSchema(Schema):
    id = fields.String(required=True)
    state = fields.String(required=True)
    unknowns = fields.List(fields.Dict(), required=True, metadata={
        "description": "name, estimate, standard_error, ci95 [low, high], at_bound (null where undefined)"})
    correlation = fields.List(fields.List(fields.Float(allow_none=True)), required=True)
    sum_of_squares = fields.Float(allow_none=True)
    chi_square = fields.Float(allow_none=True)
    dof = fields.Integer(allow_none=True)
    aic = fields.Float(allow_none=True)
    bic = fields.Float(allow_none=True)
    points = fields.Integer(allow_none=True)
    warnings = fields.List(fields.String())
    starts = fields.List(fields.Dict(), metadata={"description": "every start's outcome, best first"})
    experiments = fields.List(fields.Dict(), metadata={
        "description": "per experiment: times, observed, fitted, residuals (weighted) and fitted curves on a fine grid"})
    caution = fields.String()


__all__ = ["CalibrationSpecSchema", "Limits", "problem_of", "issue_pointer", "read_csv", "CAUTION"]

