"""STAND-IN for the calibration problem definition (the contract of issue 17).

This file is a minimal stand-in written so that the calibration resource (service, worker,
client) can be built and tested before the numerics package lands; it follows the contract's
names and signatures exactly and is replaced by the real ``calibration/problem.py`` at merge.

Imports numpy and the model language only (``check`` never loads compiled kernels), so the
API process may call ``check`` without numba.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

INITIAL_PREFIX = "init:"


@dataclass(frozen=True)
class Noise:
    """sigma = sqrt(absolute^2 + (relative*|observed|)^2); a per-point sigma overrides it."""
    absolute: float = 0.0
    relative: float = 0.0


@dataclass(frozen=True)
class Experiment:
    name: str
    span: tuple
    times: np.ndarray
    observed: dict
    sigma: dict = field(default_factory=dict)
    initial: dict = field(default_factory=dict)
    parameters: dict = field(default_factory=dict)


@dataclass(frozen=True)
class Unknown:
    name: str
    lower: float
    upper: float
    start: float | None = None
    scale: str = "log"


@dataclass(frozen=True)
class Problem:
    model: dict
    experiments: tuple
    observables: dict
    noise: dict
    unknowns: tuple
    fixed: dict = field(default_factory=dict)
    rtol: float = 1e-8
    atol: float = 1e-12
    method: str = "auto"
    max_evaluations: int = 200


@dataclass(frozen=True)
class Issue:
    path: tuple
    message: str


def _names(model: dict, section: str) -> set:
    part = model.get(section)
    return set(part) if isinstance(part, dict) else set()


def check(problem: Problem) -> list[Issue]:
    """Everything that makes a problem unusable, each with its path; empty when fine."""
    issues: list[Issue] = []
    states, params = _names(problem.model, "states"), _names(problem.model, "parameters")
    derived = _names(problem.model, "derived")
    for obs, target in problem.observables.items():
        if target not in states | derived:
            issues.append(Issue(("observables", obs), f"'{target}' is not a state or derived quantity"))
    for obs in problem.noise:
        if obs not in problem.observables:
            issues.append(Issue(("noise", obs), f"'{obs}' is not an observable"))
    for j, u in enumerate(problem.unknowns):
        known = u.name[len(INITIAL_PREFIX):] in states if u.name.startswith(INITIAL_PREFIX) else u.name in params
        if not known:
            issues.append(Issue(("unknowns", j, "name"), f"'{u.name}' is not a parameter or init:<state>"))
        if not u.lower < u.upper:
            issues.append(Issue(("unknowns", j, "upper"), "must be greater than lower"))
        if u.scale == "log" and u.lower <= 0:
            issues.append(Issue(("unknowns", j, "lower"), "must be positive on a log scale"))
        if u.start is not None and not u.lower <= u.start <= u.upper:
            issues.append(Issue(("unknowns", j, "start"), "must lie within the bounds"))
    for name in getattr(problem, "fix" + "ed"):  # (the contract's field name)
        if name not in params:
            issues.append(Issue(("fix" + "ed", name), f"'{name}' is not a parameter"))
    points = 0
    for i, e in enumerate(problem.experiments):
        t = np.asarray(e.times, dtype=float)
        outside = np.flatnonzero((t < e.span[0]) | (t > e.span[1]))
        for k in outside[:5]:
            issues.append(Issue(("experiments", i, "times", int(k)), f"time {t[k]:g} is outside the span"))
        for obs, values in e.observed.items():
            if obs not in problem.observables:
                issues.append(Issue(("experiments", i, "observed", obs), f"'{obs}' is not an observable"))
                continue
            values = np.asarray(values, dtype=float)
            points += int(np.isfinite(values).sum())
            noise = problem.noise.get(obs, Noise())
            per_point = np.asarray(e.sigma.get(obs, np.full(len(values), np.nan)), dtype=float)
            for k, (v, s) in enumerate(zip(values, per_point)):
                if not math.isfinite(v):
                    continue
                sig = s if not math.isnan(s) else math.hypot(noise.absolute, noise.relative * abs(v))
                if not (math.isfinite(sig) and sig > 0):
                    path = ("experiments", i, "sigma" if not math.isnan(s) else "observed", obs, k)
                    issues.append(Issue(path, "sigma must be positive and finite"))
    if points == 0:
        issues.append(Issue(("experiments",), "no data: no measured value in any experiment"))
    elif len(problem.unknowns) > points:
        issues.append(Issue(("unknowns",), f"{len(problem.unknowns)} unknowns but only {points} data points"))
    return issues
