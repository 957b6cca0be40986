"""A parameter-estimation problem: experiments, measurements, noise, unknowns; and its check.

Pure data and pure checks. This module imports only the model language (``engine.language``,
no numba), NumPy and the standard library, so the API process can check a problem before it
accepts it; the numerical work is in :mod:`calibration.fit`.

Vocabulary
----------
- An **experiment** is one run of the model under its own conditions (initial values,
  parameter overrides, span) with measurements at its ``times``.
- An **observable** is a name the measurements use, mapped to a state or a derived quantity
  of the model.
- The **noise** of an observable gives each measurement its standard deviation
  sigma = sqrt(absolute^2 + (relative * |observed|)^2); a per-point sigma overrides it. An
  observable without a noise entry has sigma = 1 (ordinary, unweighted least squares).
- An **unknown** is a parameter (by name) or the initial value of a state
  (``init:<state>``), searched between its bounds on a log10 or linear scale.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from engine.choices import MACHINE_CODE_MODES, METHODS
from engine.language.check import ModelError, read_checked
from engine.language.limits import DEFAULT_LIMITS
from engine.language.names import suggest

INITIAL_PREFIX = "init:"  # the same label engine.sensitivities gives an initial value
SCALES = ("log", "linear")


@dataclass(frozen=True)
class Noise:
    """sigma = sqrt(absolute^2 + (relative * |observed|)^2), per measurement."""
    absolute: float = 0.0
    relative: float = 0.0


UNIT_NOISE = Noise(absolute=1.0)  # an observable the problem gives no noise for


@dataclass(frozen=True)
class Experiment:
    name: str
    span: tuple
    times: np.ndarray                      # sorted, within span
    observed: dict                         # observable -> values at times (NaN: missing, skipped)
    sigma: dict = field(default_factory=dict)       # observable -> per-point sigma (NaN: use the Noise)
    initial: dict = field(default_factory=dict)     # state -> initial value for this experiment
    parameters: dict = field(default_factory=dict)  # parameter -> value for this experiment


@dataclass(frozen=True)
class Unknown:
    name: str            # a parameter's name, or "init:<state>"
    lower: float
    upper: float
    start: float | None = None
    scale: str = "log"   # "log" (searched in log10) | "linear"


@dataclass(frozen=True)
class Problem:
    model: dict
    experiments: tuple
    observables: dict              # observable -> a state or derived-quantity name of the model
    noise: dict                    # observable -> Noise
    unknowns: tuple
    parameters: dict = field(default_factory=dict)  # parameter values (not estimated) for every experiment
    rtol: float = 1e-8
    atol: float = 1e-12
    method: str = "auto"
    max_evaluations: int = 200
    machine_code: str = "never"    # engine.kernels.native.choose mode for the repeated solves


@dataclass(frozen=True)
class Issue:
    path: tuple
    message: str


def _finite(x) -> bool:
    try:
        return isinstance(x, (int, float, np.floating, np.integer)) and not isinstance(x, bool) \
            and math.isfinite(float(x))
    except (TypeError, ValueError):
        return False


def _hint(name, known) -> str:
    s = suggest(str(name), list(known))
    return f"; {s}" if s else ""


def sigmas(problem: Problem, experiment: Experiment, observable: str) -> np.ndarray:
    """Each point's sigma for ``observable`` in ``experiment`` (NaN where nothing is observed)."""
    obs = np.asarray(experiment.observed[observable], dtype=float)
    noise = problem.noise.get(observable, UNIT_NOISE)
    with np.errstate(invalid="ignore"):
        s = np.sqrt(float(noise.absolute) ** 2 + (float(noise.relative) * np.abs(obs)) ** 2)
    given = experiment.sigma.get(observable)
    if given is not None:
        given = np.asarray(given, dtype=float)
        if given.shape == s.shape:
            s = np.where(np.isnan(given), s, given)
    return np.where(np.isnan(obs), np.nan, s)


def count_points(problem: Problem) -> int:
    """Measurements (non-missing cells) over every experiment and observable."""
    n = 0
    for e in problem.experiments:
        for values in e.observed.values():
            a = np.asarray(values, dtype=float)
            n += int(np.count_nonzero(~np.isnan(a)))
    return n


def check(problem: Problem) -> list[Issue]:
    """Every problem with ``problem`` (empty when it can be fitted). Never raises on bad input.

    Paths name the field: ("unknowns", 2, "lower"), ("experiments", 0, "observed", "A", 5)
    (row 5 of observable A in the first experiment), and so on."""
    issues: list[Issue] = []

    def add(path, message):
        issues.append(Issue(tuple(path), message))

    try:
        spec, _ = read_checked(problem.model, DEFAULT_LIMITS)
    except ModelError as err:
        for i in err.issues:
            add(("model",) + tuple(i.path), i.text())
        return issues
    except Exception as err:  # noqa: BLE001 - a model we cannot read is the caller's input error
        add(("model",), f"cannot be read: {err}")
        return issues
    states, params, derived = list(spec.state_names), list(spec.param_names), list(spec.aux_names)

    # solver settings
    if not (_finite(problem.rtol) and problem.rtol > 0):
        add(("rtol",), "must be a positive number")
    if not (_finite(problem.atol) and problem.atol >= 0):
        add(("atol",), "must be a non-negative number")
    if problem.method not in METHODS:
        add(("method",), f"unknown method '{problem.method}'; choose one of {', '.join(METHODS)}")
    if problem.machine_code not in MACHINE_CODE_MODES:
        add(("machine_code",), f"choose one of {', '.join(MACHINE_CODE_MODES)}")
    if not (isinstance(problem.max_evaluations, int) and problem.max_evaluations >= 1):
        add(("max_evaluations",), "must be a positive whole number")

    # observables and noise
    if not problem.observables:
        add(("observables",), "name at least one observable (a state or a derived quantity)")
    for obs, target in problem.observables.items():
        if target not in states and target not in derived:
            add(("observables", obs), f"'{target}' is neither a state nor a derived quantity of the "
                                      f"model{_hint(target, states + derived)}")
    for obs, noise in problem.noise.items():
        if obs not in problem.observables:
            add(("noise", obs), f"unknown observable '{obs}'{_hint(obs, problem.observables)}")
            continue
        for key in ("absolute", "relative"):
            v = getattr(noise, key)
            if not (_finite(v) and v >= 0):
                add(("noise", obs, key), "must be a finite number >= 0")

    # unknowns
    if not problem.unknowns:
        add(("unknowns",), "name at least one parameter or initial value to estimate")
    seen: set = set()
    estimated_params, estimated_initial = set(), set()
    for i, u in enumerate(problem.unknowns):
        name = u.name
        if isinstance(name, str) and name.startswith(INITIAL_PREFIX):
            state = name[len(INITIAL_PREFIX):]
            if state not in states:
                add(("unknowns", i, "name"), f"unknown state '{state}'{_hint(state, states)}")
            estimated_initial.add(state)
        elif name not in params:
            add(("unknowns", i, "name"), f"unknown parameter '{name}'{_hint(name, params)} "
                                         f"(an initial value is written '{INITIAL_PREFIX}<state>')")
        else:
            estimated_params.add(name)
        if name in seen:
            add(("unknowns", i, "name"), f"'{name}' is named twice")
        seen.add(name)
        if u.scale not in SCALES:
            add(("unknowns", i, "scale"), f"choose one of {', '.join(SCALES)}")
        ok_lo, ok_hi = _finite(u.lower), _finite(u.upper)
        if not ok_lo:
            add(("unknowns", i, "lower"), "must be a finite number")
        if not ok_hi:
            add(("unknowns", i, "upper"), "must be a finite number")
        if ok_lo and ok_hi:
            if not u.lower < u.upper:
                add(("unknowns", i, "upper"), f"bounds are crossed or equal: lower {u.lower} must be "
                                              f"below upper {u.upper}")
            if u.scale == "log" and u.lower <= 0:
                add(("unknowns", i, "lower"), "a log-scale unknown needs a positive lower bound; "
                                              "use scale 'linear' for values that may be zero or negative")
        if u.start is not None:
            if not _finite(u.start):
                add(("unknowns", i, "start"), "must be a finite number")
            elif ok_lo and ok_hi and not (u.lower <= u.start <= u.upper):
                add(("unknowns", i, "start"), f"{u.start} is outside the bounds [{u.lower}, {u.upper}]")

    for name, value in problem.parameters.items():
        if name not in params:
            add(("parameters", name), f"unknown parameter '{name}'{_hint(name, params)}")
        elif name in estimated_params:
            add(("parameters", name), f"'{name}' is estimated; it cannot also be given a value")
        if not _finite(value):
            add(("parameters", name), "must be a finite number")

    # experiments and measurements
    if not problem.experiments:
        add(("experiments",), "give at least one experiment with measurements")
    names: set = set()
    for ei, e in enumerate(problem.experiments):
        at = ("experiments", ei)
        if e.name in names:
            add(at + ("name",), f"'{e.name}' is named twice")
        names.add(e.name)
        span_ok = False
        try:
            t0, t1 = (float(v) for v in e.span)
            span_ok = math.isfinite(t0) and math.isfinite(t1) and t1 > t0
        except (TypeError, ValueError):
            t0 = t1 = math.nan
        if not span_ok:
            add(at + ("span",), "must be two finite times, the end after the start")
        try:
            times = np.asarray(e.times, dtype=float)
        except (TypeError, ValueError):
            add(at + ("times",), "must be numbers")
            continue
        if times.ndim != 1 or len(times) == 0:
            add(at + ("times",), "give at least one measurement time")
            continue
        bad = np.flatnonzero(~np.isfinite(times))
        for row in bad[:5]:
            add(at + ("times", int(row)), "must be a finite number")
        if len(bad) == 0:
            back = np.flatnonzero(np.diff(times) < 0)
            if len(back):
                add(at + ("times", int(back[0]) + 1), "times must be sorted (non-decreasing)")
            if span_ok:
                out = np.flatnonzero((times < t0) | (times > t1))
                for row in out[:5]:
                    add(at + ("times", int(row)), f"time {times[row]} is outside the span [{t0}, {t1}]")
        for key, table, kind in (("initial", e.initial, states), ("parameters", e.parameters, params)):
            for name, value in table.items():
                if name not in kind:
                    add(at + (key, name), f"unknown {'state' if key == 'initial' else 'parameter'} "
                                          f"'{name}'{_hint(name, kind)}")
                elif key == "initial" and name in estimated_initial:
                    add(at + (key, name), f"the initial value of '{name}' is estimated; it cannot also "
                                          "be set by an experiment")
                elif key == "parameters" and name in estimated_params:
                    add(at + (key, name), f"'{name}' is estimated; it cannot also be set by an experiment")
                if not _finite(value):
                    add(at + (key, name), "must be a finite number")
        if not e.observed:
            add(at + ("observed",), "no measurements: give at least one observable column")
        points = 0
        for obs, values in e.observed.items():
            where = at + ("observed", obs)
            if obs not in problem.observables:
                add(where, f"unknown observable '{obs}'{_hint(obs, problem.observables)}")
                continue
            try:
                v = np.asarray(values, dtype=float)
            except (TypeError, ValueError):
                add(where, "must be numbers (NaN for a missing cell)")
                continue
            if v.shape != times.shape:
                add(where, f"has {v.size} values for {len(times)} times")
                continue
            for row in np.flatnonzero(np.isinf(v))[:5]:
                add(where + (int(row),), "must be a finite number (leave the cell empty when missing)")
            points += int(np.count_nonzero(np.isfinite(v)))
            given = e.sigma.get(obs)
            if given is not None:
                g = np.asarray(given, dtype=float)
                if g.shape != times.shape:
                    add(at + ("sigma", obs), f"has {g.size} values for {len(times)} times")
                    continue
                for row in np.flatnonzero(~np.isnan(g) & ~((g > 0) & np.isfinite(g)))[:5]:
                    add(at + ("sigma", obs, int(row)), f"sigma must be positive and finite, not {g[row]}")
            noise = problem.noise.get(obs, UNIT_NOISE)
            if not (_finite(noise.absolute) and _finite(noise.relative)):
                continue
            s = sigmas(problem, e, obs)
            zero = np.flatnonzero(np.isfinite(v) & ~(s > 0))
            for row in zero[:5]:
                add(where + (int(row),), "sigma is zero here: the noise model gives no error for this "
                                         "value (add an absolute sigma, or a per-point sigma)")
        for obs in e.sigma:
            if obs not in e.observed:
                add(at + ("sigma", obs), f"sigma given for '{obs}', which has no measurements here")
        if e.observed and points == 0:
            add(at + ("observed",), "every cell is empty: no measurements to fit")

    total = count_points(problem) if not any(i.path[:1] == ("experiments",) for i in issues) else None
    if total is not None and problem.unknowns and total < len(problem.unknowns):
        add(("unknowns",), f"{len(problem.unknowns)} unknowns but only {total} measurements: "
                           "estimate fewer parameters or add data")
    return issues


__all__ = ["INITIAL_PREFIX", "Experiment", "Issue", "Noise", "Problem", "SCALES", "UNIT_NOISE",
           "Unknown", "check", "count_points", "sigmas"]
