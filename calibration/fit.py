"""STAND-IN for the calibration fit (the contract of issue 17).

A minimal stand-in so that the calibration resource can be built and tested before the
numerics package lands: bounded trust-region least squares (scipy.optimize.least_squares)
on weighted residuals with a FINITE-DIFFERENCE Jacobian, standard errors from the
Gauss-Newton information at the best start. It follows the contract's names, signatures
and JSON shapes exactly and is replaced by the real ``calibration/fit.py`` (exact residual
Jacobians from sensitivities) at merge.
"""
from __future__ import annotations

import math
import time
from dataclasses import asdict, dataclass

import numpy as np
from scipy import optimize, stats

from calibration.problem import INITIAL_PREFIX, Noise, Problem

CAUTION = ("Estimates are only as good as the model and the data. The intervals assume that the "
           "model is right and that the measurement errors are independent. Have a qualified person "
           "check them before any design or dosing decision.")
PENALTY = 1e3   # residual of a point whose solve failed
FINE_POINTS = 201


def _scaled_bounds(problem: Problem):
    lo = np.array([math.log(u.lower) if u.scale == "log" else u.lower for u in problem.unknowns])
    hi = np.array([math.log(u.upper) if u.scale == "log" else u.upper for u in problem.unknowns])
    return lo, hi


def _to_natural(problem: Problem, z: np.ndarray) -> np.ndarray:
    return np.array([math.exp(v) if u.scale == "log" else v for u, v in zip(problem.unknowns, z)])


def _to_scaled(problem: Problem, x) -> np.ndarray:
    return np.array([math.log(v) if u.scale == "log" else v for u, v in zip(problem.unknowns, x)])


def starts(problem: Problem, count: int, seed: int = 0) -> np.ndarray:
    """(count, m) starting points in natural units: row 0 the given starts (bound midpoints in
    scale where none is given), the others a Latin hypercube in the scaled bounds."""
    lo, hi = _scaled_bounds(problem)
    m = len(lo)
    out = np.empty((count, m))
    given = [u.start for u in problem.unknowns]
    out[0] = [g if g is not None else _to_natural(problem, (lo + hi) / 2)[j] for j, g in enumerate(given)]
    if count > 1:
        rng = np.random.default_rng(seed)
        n = count - 1
        cube = (rng.permuted(np.tile(np.arange(n), (m, 1)), axis=1).T + rng.random((n, m))) / n
        for r in range(n):
            out[r + 1] = _to_natural(problem, lo + cube[r] * (hi - lo))
    return out


@dataclass
class StartOutcome:
    index: int
    x0: list
    x: list
    sum_of_squares: float
    status: str
    message: str
    evaluations: int
    failed_solves: int
    seconds: float

    def to_json(self) -> dict:
        d = asdict(self)
        d["sum_of_squares"] = self.sum_of_squares if math.isfinite(self.sum_of_squares) else None
        return d

    @classmethod
    def from_json(cls, d: dict) -> "StartOutcome":
        d = dict(d)
        d["sum_of_squares"] = math.inf if d.get("sum_of_squares") is None else d["sum_of_squares"]
        return cls(**d)


class _Model:
    """The problem's model, prepared once, with each experiment's values."""

    def __init__(self, problem: Problem):
        from engine.model import prepare

        self.problem = problem
        self.m = prepare(problem.model)
        self.state_index = {n: i for i, n in enumerate(self.m.state_names)}
        self.aux_index = {n: i for i, n in enumerate(self.m.aux_names)}
        self.failed = 0

    def solve(self, e, x, t_out):
        from engine.integrate import SUCCEEDED, SolverOptions, integrate

        params = {**getattr(self.problem, "fix" + "ed"), **e.parameters}  # (the contract's field name)
        initial = dict(e.initial)
        for u, v in zip(self.problem.unknowns, x):
            if u.name.startswith(INITIAL_PREFIX):
                initial[u.name[len(INITIAL_PREFIX):]] = float(v)
            else:
                params[u.name] = float(v)
        p, y0 = self.m.with_overrides(params, initial)
        o = SolverOptions(method=self.problem.method, rtol=self.problem.rtol, atol=self.problem.atol,
                          max_steps=200_000, max_wall_seconds=60.0)
        try:
            sol = integrate(self.m.kernel, p, y0, tuple(e.span), t_out, o)
        except Exception:
            return None
        if sol.outcome != SUCCEEDED or len(sol.t) != len(t_out):
            return None
        out = {}
        for obs, target in self.problem.observables.items():
            if target in self.state_index:
                out[obs] = sol.y[:, self.state_index[target]]
            else:
                out[obs] = sol.aux[:, self.aux_index[target]]
        return out

    def curves(self, e, x, times):
        t_out, back = np.unique(np.asarray(times, dtype=float), return_inverse=True)
        got = self.solve(e, x, t_out)
        return None if got is None else {k: v[back] for k, v in got.items()}

    def sigma(self, e, obs, values):
        noise = self.problem.noise.get(obs, Noise(absolute=1.0))
        sig = np.hypot(noise.absolute, noise.relative * np.abs(values))
        per = e.sigma.get(obs)
        if per is not None:
            per = np.asarray(per, dtype=float)
            sig = np.where(np.isnan(per), sig, per)
        return sig

    def residuals(self, x) -> np.ndarray:
        parts = []
        for e in self.problem.experiments:
            fitted = self.curves(e, x, e.times)
            for obs, values in e.observed.items():
                values = np.asarray(values, dtype=float)
                keep = np.isfinite(values)
                if fitted is None:
                    parts.append(np.full(int(keep.sum()), PENALTY))
                    continue
                r = (fitted[obs] - values) / self.sigma(e, obs, values)
                parts.append(np.where(np.isfinite(r), r, PENALTY)[keep])
            if fitted is None:
                self.failed += 1
        return np.concatenate(parts) if parts else np.zeros(0)


def run_start(problem: Problem, index: int, x0) -> StartOutcome:
    """One bounded least-squares run from ``x0``; never raises for numerical trouble."""
    began = time.perf_counter()
    model = _Model(problem)
    lo, hi = _scaled_bounds(problem)
    z0 = np.clip(_to_scaled(problem, x0), lo, hi)
    evaluations = [0]

    def fun(z):
        evaluations[0] += 1
        return model.residuals(_to_natural(problem, z))

    try:
        res = optimize.least_squares(fun, z0, bounds=(lo, hi), method="trf", diff_step=1e-6,
                                     x_scale=1.0, max_nfev=problem.max_evaluations,
                                     xtol=1e-12, ftol=1e-12, gtol=1e-12)
        status = "converged" if res.status > 0 else "max_evaluations" if res.status == 0 else "failed"
        x = _to_natural(problem, res.x)
        ssq = float(np.sum(res.fun ** 2))
        if model.failed and np.any(res.fun == PENALTY):
            status = "failed"
        message = res.message
    except Exception as e:  # numerical trouble is an outcome, never an exception
        status, x, ssq, message = "failed", np.asarray(x0, dtype=float), math.inf, f"{type(e).__name__}: {e}"
    return StartOutcome(index=int(index), x0=[float(v) for v in x0], x=[float(v) for v in x],
                        sum_of_squares=ssq if status != "failed" else (ssq if math.isfinite(ssq) else math.inf),
                        status=status, message=str(message), evaluations=evaluations[0],
                        failed_solves=model.failed, seconds=time.perf_counter() - began)


@dataclass
class Estimate:
    body: dict

    def to_json(self) -> dict:
        return self.body


def _safe(v):
    if isinstance(v, dict):
        return {k: _safe(x) for k, x in v.items()}
    if isinstance(v, (list, tuple, np.ndarray)):
        return [_safe(x) for x in v]
    if isinstance(v, (float, np.floating)):
        return float(v) if math.isfinite(v) else None
    if isinstance(v, np.integer):
        return int(v)
    return v


def summarise(problem: Problem, outcomes: list) -> Estimate:
    """Best start, standard errors, intervals, correlation, residuals and fitted curves."""
    ordered = sorted(outcomes, key=lambda o: (o.status == "failed", o.sum_of_squares))
    usable = [o for o in ordered if o.status != "failed" and math.isfinite(o.sum_of_squares)]
    if not usable:
        raise ValueError("no start reached a finite sum of squares")
    best = usable[0]
    x = np.asarray(best.x, dtype=float)
    model = _Model(problem)
    r = model.residuals(x)
    n, m = len(r), len(x)
    jac = np.empty((n, m))
    for j in range(m):
        h = 1e-6 * max(abs(x[j]), 1e-12)
        xp, xm = x.copy(), x.copy()
        xp[j] += h
        xm[j] -= h
        jac[:, j] = (model.residuals(xp) - model.residuals(xm)) / (2 * h)
    dof = n - m
    ssq = float(r @ r)
    warnings = []
    info = jac.T @ jac
    cond = np.linalg.cond(info) if m else 1.0
    if not np.isfinite(cond) or cond > 1e12:
        warnings.append(f"the information matrix is near-singular (condition {cond:.3g}): some "
                        "parameters cannot be told apart from these data")
    s2 = ssq / dof if dof > 0 else math.nan
    try:
        cov = np.linalg.pinv(info) * s2
    except np.linalg.LinAlgError:
        cov = np.full((m, m), np.nan)
    se = np.sqrt(np.clip(np.diag(cov), 0, None))
    tq = stats.t.ppf(0.975, dof) if dof > 0 else math.nan
    with np.errstate(divide="ignore", invalid="ignore"):
        corr = cov / np.outer(se, se)
    unknowns = []
    for j, u in enumerate(problem.unknowns):
        at_bound = bool(np.isclose(x[j], u.lower, rtol=1e-6) or np.isclose(x[j], u.upper, rtol=1e-6))
        if at_bound:
            warnings.append(f"'{u.name}' is at a bound")
        if se[j] > abs(x[j]) and x[j] != 0:
            warnings.append(f"'{u.name}' is practically non-identifiable (standard error above its value)")
        unknowns.append({"name": u.name, "estimate": x[j], "standard_error": se[j],
                         "ci95": [x[j] - tq * se[j], x[j] + tq * se[j]], "at_bound": at_bound})
    experiments = []
    for e in problem.experiments:
        fitted = model.curves(e, x, e.times) or {}
        fine_t = np.unique(np.concatenate([np.linspace(e.span[0], e.span[1], FINE_POINTS), e.times]))
        fine = model.curves(e, x, fine_t) or {}
        residuals = {}
        for obs, values in e.observed.items():
            values = np.asarray(values, dtype=float)
            if obs in fitted:
                residuals[obs] = (fitted[obs] - values) / model.sigma(e, obs, values)
        experiments.append({"name": e.name, "times": e.times, "observed": dict(e.observed),
                            "fitted": {k: fitted[k] for k in e.observed if k in fitted},
                            "residuals": residuals,
                            "fine": {"times": fine_t, "fitted": {k: fine[k] for k in e.observed if k in fine}}})
    body = {"unknowns": unknowns, "correlation": corr, "sum_of_squares": ssq, "chi_square": ssq,
            "dof": dof, "aic": n * math.log(ssq / n) + 2 * m if ssq > 0 and n else None,
            "bic": n * math.log(ssq / n) + m * math.log(n) if ssq > 0 and n else None,
            "points": n, "warnings": warnings, "starts": [o.to_json() for o in ordered],
            "experiments": experiments, "caution": CAUTION}
    return Estimate(_safe(body))
