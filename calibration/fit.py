"""Weighted least squares of a model against measurements, with exact residual Jacobians.

Method
------
The unknowns x (natural units) are searched in scaled variables z: z = log10(x) for a
log-scale unknown, z = x for a linear one. The residuals are

    r_k(z) = (observed_k - model_k(x(z))) / sigma_k

over every experiment, observable and measured point, and the objective is their sum of
squares S = sum r_k^2 (the weighted sum of squares, reported as ``sum_of_squares``).
``scipy.optimize.least_squares`` minimises it by its bounded trust-region reflective method
("trf") from each start. The residual Jacobian is exact, never a finite difference:

    dr_k/dz_j = -(1/sigma_k) * d model_k / d x_j * dx_j/dz_j,   dx_j/dz_j = x_j ln 10 (log scale)

where d model/d x comes from the engine's forward sensitivities (engine.sensitivities: the
model is augmented once per problem, and each evaluation integrates each experiment once, at
its measurement times, with the sensitivities sharing the states' error control). An unknown
named ``init:<state>`` is that state's initial value, whose sensitivity starts as a unit
vector. A derived-quantity observable a(t, y, p) has

    d a / d x_j = sum_i (d a / d y_i) (d y_i / d x_j) + d a / d p_j

with d a/d y and d a/d p from the model language's exact symbolic derivatives (compiled to one
register program per problem). A solve that fails inside the optimiser is counted and gives a
large finite residual (so the trust region shrinks away from it); it never raises.

Statistics (at the best start)
------------------------------
With N measured points, m unknowns, dof = N - m, and J the Jacobian of the weighted residuals
with respect to the natural unknowns:

- residual variance s^2 = S / dof;
- covariance C = s^2 (J^T J)^-1 (the Fisher information J^T J scaled by the residual
  variance), computed by a singular value decomposition of J in the scaled variables with its
  columns normalised, then taken to natural units by the chain rule dx/dz; directions the data
  do not determine (singular values below 1e-10 of the largest) have no finite standard error;
- standard errors sqrt(C_jj), 95 % intervals x_j -/+ t_{0.975, dof} * se_j (Student t);
- correlation C_ij / (se_i se_j);
- chi_square = S, the weighted sum of squares with the sigmas as given, and its upper tail
  probability with dof degrees of freedom (meaningful when the sigmas are real standard
  deviations, not weights);
- AIC = chi_square + sum_k ln(2 pi sigma_k^2) + 2 m and BIC = chi_square + sum_k ln(2 pi sigma_k^2)
  + m ln N: -2 ln L of independent Gaussian errors with the given sigmas, plus the usual
  penalties (compare models only on the same data).

Warnings: an estimate at a bound (its interval is then not valid), near-singular information
(condition number of the column-normalised J^T J above 1e10), practically non-identifiable
unknowns (relative standard error above 1, or |correlation| above 0.99 with another unknown),
failed solves, starts that ended elsewhere.

Estimates are only as good as the model and the data: the intervals assume the model is right
and the errors independent. Check with a qualified person before design or dosing decisions.
"""
from __future__ import annotations

import math
import threading
import time
from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import least_squares
from scipy.stats import chi2 as chi2_distribution
from scipy.stats import qmc
from scipy.stats import t as student_t

from calibration.problem import INITIAL_PREFIX, Problem, check, sigmas
from engine.integrate import SolverOptions, integrate
from engine.kernels import native, vm
from engine.kernels.program import ConstPool, compile_program
from engine.language.check import read_checked
from engine.language.derivative import gradients
from engine.language.limits import DEFAULT_LIMITS
from engine.sensitivities import prepare_sensitivities, split

CAUTION = ("Estimates are only as good as the model and the data: the intervals assume the model is "
           "right and the measurement errors independent (and, for the standard errors, the model "
           "nearly linear in the unknowns near the estimate). Check with a qualified person before "
           "design or dosing decisions.")

CONVERGED, MAX_EVALUATIONS, FAILED = "converged", "max_evaluations", "failed"
SOLVE_SECONDS = 120.0       # wall-time limit of one solve inside the optimiser
FINE_POINTS = 200           # points of the fitted curves on the fine grid
SINGULAR = 1e-10            # singular values of the normalised J below this fraction: undetermined
ILL_CONDITIONED = 1e10      # condition number of the normalised information that earns a warning
STRONG_CORRELATION = 0.99
SAME_OPTIMUM = 1e-6         # relative difference of S within which two starts found the same optimum
SAME_OPTIMUM_ABS = 1e-9     # ... and per point, absolute (noise-free data: S near zero, round-off)
TOLERANCES = {"ftol": 1e-12, "xtol": 1e-10, "gtol": 1e-10}


def _to_scaled(problem: Problem, x) -> np.ndarray:
    x = np.asarray(x, dtype=float)
    return np.array([math.log10(v) if u.scale == "log" else v for u, v in zip(problem.unknowns, x)])


def _to_natural(problem: Problem, z) -> np.ndarray:
    return np.array([10.0 ** v if u.scale == "log" else v for u, v in zip(problem.unknowns, z)])


def _scaled_bounds(problem: Problem) -> tuple[np.ndarray, np.ndarray]:
    lo = _to_scaled(problem, [u.lower for u in problem.unknowns])
    hi = _to_scaled(problem, [u.upper for u in problem.unknowns])
    return lo, hi


def starts(problem: Problem, count: int, seed: int = 0) -> np.ndarray:
    """``count`` starting points (natural units, one row each). Row 0 holds the given starts
    (an unknown without one starts at its bounds' midpoint in its scale); the others are a
    Latin hypercube in the scaled bounds (so spread over the decades of a log-scale unknown)."""
    m = len(problem.unknowns)
    lo, hi = _scaled_bounds(problem)
    count = max(int(count), 1)
    out = np.empty((count, m))
    given = [_to_scaled(problem, [u.start])[0] if u.start is not None else 0.5 * (a + b)
             for u, a, b in zip(problem.unknowns, lo, hi)]
    out[0] = given
    if count > 1:
        sample = qmc.LatinHypercube(d=m, seed=seed).random(count - 1)
        out[1:] = lo + sample * (hi - lo)
    natural = np.array([_to_natural(problem, row) for row in out])
    # 10 ** log10(x) may miss a bound by an ulp
    return np.clip(natural, [u.lower for u in problem.unknowns], [u.upper for u in problem.unknowns])


@dataclass
class StartOutcome:
    index: int
    x0: list
    x: list
    sum_of_squares: float      # the weighted sum of squares at x (inf when it failed)
    status: str                # "converged" | "max_evaluations" | "failed"
    message: str
    evaluations: int           # model evaluations (each integrates every experiment once)
    failed_solves: int
    seconds: float

    def to_json(self) -> dict:
        return {"index": self.index, "x0": _json_list(self.x0), "x": _json_list(self.x),
                "sum_of_squares": _json_float(self.sum_of_squares), "status": self.status,
                "message": self.message, "evaluations": self.evaluations,
                "failed_solves": self.failed_solves, "seconds": round(float(self.seconds), 6)}

    @classmethod
    def from_json(cls, d: dict) -> "StartOutcome":
        ssr = d.get("sum_of_squares")
        return cls(index=int(d["index"]), x0=[_float(v) for v in d["x0"]], x=[_float(v) for v in d["x"]],
                   sum_of_squares=math.inf if ssr is None else float(ssr), status=str(d["status"]),
                   message=str(d.get("message", "")), evaluations=int(d.get("evaluations", 0)),
                   failed_solves=int(d.get("failed_solves", 0)), seconds=float(d.get("seconds", 0.0)))


def _float(v) -> float:
    return math.nan if v is None else float(v)


def _json_float(v):
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else None


def _json_list(values) -> list:
    return [_json_float(v) for v in values]


def _json_matrix(a) -> list:
    return [_json_list(row) for row in a]


# ---------------------------------------------------------------------------------------------
# The model side: one evaluation = one sensitivity solve per experiment

class _Derived:
    """Values and exact gradients (d/dy, d/dp) of the derived quantities used as observables."""

    def __init__(self, model, names: list[str]):
        spec, _ = read_checked(model, DEFAULT_LIMITS)
        b = spec.builder
        b.strict = False
        index = {n: i for i, n in enumerate(spec.aux_names)}
        roots = [spec.aux[index[n]] for n in names]
        gy, gp = gradients(b, roots, "y"), gradients(b, roots, "p")
        outputs, self.dy, self.dp = list(enumerate(roots)), [], []
        for r in range(len(roots)):
            for i, node in sorted(gy[r].items()):
                self.dy.append((r, i, len(outputs)))
                outputs.append((len(outputs), node))
            for j, node in sorted(gp[r].items()):
                self.dp.append((r, j, len(outputs)))
                outputs.append((len(outputs), node))
        pool = ConstPool()
        self.code, self.n_regs = compile_program(outputs, pool)
        self.consts = pool.array()
        self.n_out, self.count = len(outputs), len(roots)
        self.n, self.n_p = len(spec.state_names), len(spec.param_names)

    def evaluate(self, t, y, p):
        """(values (k, r), d/dy (k, r, n), d/dp (k, r, n_p)) at times ``t`` with states ``y``."""
        k = len(t)
        values = np.empty((k, self.count))
        dy = np.zeros((k, self.count, self.n))
        dp = np.zeros((k, self.count, self.n_p))
        regs, out = np.zeros(max(self.n_regs, 1)), np.zeros(self.n_out)
        p = np.ascontiguousarray(p, dtype=float)
        for row in range(k):
            vm.run(self.code, self.consts, float(t[row]), np.ascontiguousarray(y[row]), p, regs, out)
            values[row] = out[:self.count]
            for r, i, slot in self.dy:
                dy[row, r, i] = out[slot]
            for r, j, slot in self.dp:
                dp[row, r, j] = out[slot]
        return values, dy, dp


@dataclass
class _Column:
    observable: str
    kind: str        # "state" | "derived"
    index: int       # state index, or index among the problem's derived observables
    rows: np.ndarray  # rows of the experiment's times that carry a measurement
    observed: np.ndarray
    sigma: np.ndarray


@dataclass
class _Setup:
    p: np.ndarray
    y0: np.ndarray
    times: np.ndarray
    span: tuple
    columns: list


class _Evaluator:
    """Model values and exact derivatives of every measured point, for given unknowns."""

    def __init__(self, problem: Problem):
        self.problem = problem
        pars = [u.name for u in problem.unknowns if not u.name.startswith(INITIAL_PREFIX)]
        inits = [u.name[len(INITIAL_PREFIX):] for u in problem.unknowns if u.name.startswith(INITIAL_PREFIX)]
        self.sm = sm = prepare_sensitivities(problem.model, pars, inits)
        base = sm.base
        self.column_of = [sm.wrt.index(u.name) for u in problem.unknowns]
        pindex = {n: i for i, n in enumerate(base.param_names)}
        sindex = {n: i for i, n in enumerate(base.state_names)}
        self.targets = [(pindex[u.name], -1) if u.name in pindex else (-1, sindex[u.name[len(INITIAL_PREFIX):]])
                        for u in problem.unknowns]
        # "auto": machine code compiled before is used at once; a problem asked for again (the
        # next chunk of starts) compiles it in the background when that is quick (native.choose)
        aug, self.machine = native.choose(sm.augmented, problem.machine_code, solves=1)
        self.kernel = aug.kernel
        derived_names = sorted({t for t in problem.observables.values() if t not in sindex})
        self.derived = _Derived(problem.model, derived_names) if derived_names else None
        dindex = {n: i for i, n in enumerate(derived_names)}
        self.setups: list[_Setup] = []
        for e in problem.experiments:
            params = dict(problem.parameters)
            params.update(e.parameters)
            p, y0 = base.with_overrides(params, e.initial)
            cols = []
            for obs in e.observed:
                values = np.asarray(e.observed[obs], dtype=float)
                rows = np.flatnonzero(~np.isnan(values))
                target = problem.observables[obs]
                kind, idx = ("state", sindex[target]) if target in sindex else ("derived", dindex[target])
                cols.append(_Column(obs, kind, idx, rows, values[rows], sigmas(problem, e, obs)[rows]))
            self.setups.append(_Setup(p, y0, np.asarray(e.times, dtype=float),
                                      (float(e.span[0]), float(e.span[1])), cols))
        self.points = sum(len(c.rows) for s in self.setups for c in s.columns)
        self.observed = np.concatenate([c.observed for s in self.setups for c in s.columns])
        self.sigma = np.concatenate([c.sigma for s in self.setups for c in s.columns])
        # a failed solve's residual: far beyond any model that stays near the data's magnitude
        self.penalty = 1e3 * max(1.0, float(np.max(np.abs(self.observed / self.sigma))))

    def conditions(self, setup: _Setup, x) -> tuple[np.ndarray, np.ndarray]:
        p, y0 = setup.p.copy(), setup.y0.copy()
        for (pi, si), v in zip(self.targets, x):
            if pi >= 0:
                p[pi] = v
            else:
                y0[si] = v
        return p, y0

    def options(self, p, y0, sensitivities: bool = True) -> SolverOptions:
        pr, sm = self.problem, self.sm
        if sensitivities:
            atol, nonneg = sm.atol(pr.atol, p, y0, True), sm.nonnegative(sm.base.nonnegative)
        else:
            atol, nonneg = pr.atol, sm.base.nonnegative
        return SolverOptions(method=pr.method, rtol=pr.rtol, atol=atol, nonnegative=nonneg,
                             diagnostics="counts", max_wall_seconds=SOLVE_SECONDS)

    def solve(self, x) -> tuple[list | None, str]:
        """Per experiment (model values (k, n_obs) at all its times, d model/d x (k, n_obs, m)),
        or (None, why) when a solve fails."""
        out = []
        sm, m = self.sm, len(self.column_of)
        for number, setup in enumerate(self.setups):
            p, y0 = self.conditions(setup, x)
            try:
                sol = integrate(self.kernel, p, sm.initial_state(y0), setup.span, setup.times,
                                self.options(p, y0))
            except (ValueError, ArithmeticError, FloatingPointError) as err:
                return None, f"experiment {number}: {err}"
            if sol.outcome != "succeeded" or len(sol.t) != len(setup.times):
                return None, f"experiment {number}: {sol.outcome}: {sol.message}"
            y, sens = split(sm, sol.y, sm.values(p, y0))
            raw = sens.raw[:, :, self.column_of]  # (k, n, m): d y / d x
            values = np.empty((len(setup.times), len(setup.columns)))
            grads = np.empty((len(setup.times), len(setup.columns), m))
            if self.derived is not None:
                dval, ddy, ddp = self.derived.evaluate(setup.times, y, p)
            for c, col in enumerate(setup.columns):
                if col.kind == "state":
                    values[:, c] = y[:, col.index]
                    grads[:, c, :] = raw[:, col.index, :]
                else:
                    values[:, c] = dval[:, col.index]
                    g = np.einsum("kn,knm->km", ddy[:, col.index, :], raw)
                    for u, (pi, _) in enumerate(self.targets):
                        if pi >= 0:
                            g[:, u] += ddp[:, col.index, pi]
                    grads[:, c, :] = g
            if not (np.isfinite(values).all() and np.isfinite(grads).all()):
                return None, f"experiment {number}: the model gave non-finite values or sensitivities"
            out.append((values, grads))
        return out, ""

    def residuals(self, x, solved=None) -> tuple[np.ndarray, np.ndarray, bool, str]:
        """(weighted residuals r (N,), d r / d x (N, m), ok, why); ``solved`` from :meth:`solve`."""
        m = len(self.column_of)
        why = ""
        if solved is None:
            solved, why = self.solve(x)
        if solved is None:
            return np.full(self.points, self.penalty), np.zeros((self.points, m)), False, why
        model, grad = [], []
        for setup, (values, grads) in zip(self.setups, solved):
            for c, col in enumerate(setup.columns):
                model.append(values[col.rows, c])
                grad.append(grads[col.rows, c, :])
        model = np.concatenate(model)
        r = (self.observed - model) / self.sigma
        J = -np.concatenate(grad) / self.sigma[:, None]
        return r, J, True, ""

    def plain(self, setup: _Setup, x, times) -> np.ndarray | None:
        """The observables (k, n_obs) at ``times`` from the model alone (no sensitivities)."""
        base = self.sm.base
        p, y0 = self.conditions(setup, x)
        try:
            sol = integrate(base.kernel, p, y0, setup.span, times, self.options(p, y0, False))
        except (ValueError, ArithmeticError, FloatingPointError):
            return None
        if sol.outcome != "succeeded" or len(sol.t) != len(times):
            return None
        out = np.empty((len(times), len(setup.columns)))
        aux_index = {n: i for i, n in enumerate(base.aux_names)}
        for c, col in enumerate(setup.columns):
            target = self.problem.observables[col.observable]
            out[:, c] = sol.y[:, col.index] if col.kind == "state" else sol.aux[:, aux_index[target]]
        return out


_EVALUATORS: list = []  # (problem, evaluator): the last few problems of this process
_EVAL_LOCK = threading.Lock()


def _evaluator(problem: Problem) -> _Evaluator:
    with _EVAL_LOCK:
        for prob, ev in _EVALUATORS:
            if prob is problem:
                return ev
    ev = _Evaluator(problem)
    with _EVAL_LOCK:
        _EVALUATORS.append((problem, ev))
        del _EVALUATORS[:-4]
    return ev


# ---------------------------------------------------------------------------------------------
# One start

def run_start(problem: Problem, index: int, x0) -> StartOutcome:
    """Least squares from ``x0`` (natural units). Never raises for numerical trouble: a start
    whose solves fail ends with status "failed" and a message."""
    started = time.perf_counter()
    x0 = [float(v) for v in x0]
    counts = {"evaluations": 0, "failed": 0, "why": ""}
    try:
        ev = _evaluator(problem)
    except Exception as err:  # noqa: BLE001 - the problem could not be prepared: report, never raise
        return StartOutcome(index, x0, x0, math.inf, FAILED, f"the problem could not be prepared: {err}",
                            0, 0, time.perf_counter() - started)
    lo, hi = _scaled_bounds(problem)
    z0 = np.clip(_to_scaled(problem, x0), lo, hi)
    log = np.array([u.scale == "log" for u in problem.unknowns])
    cache: dict = {}

    def evaluate(z):
        key = z.tobytes()
        hit = cache.get("key") == key
        if not hit:
            x = _to_natural(problem, z)
            r, J, ok, why = ev.residuals(x)
            counts["evaluations"] += 1
            if not ok:
                counts["failed"] += 1
                counts["why"] = why
            dxdz = np.where(log, x * math.log(10.0), 1.0)
            cache.update(key=key, r=r, J=J * dxdz[None, :], ok=ok)
        return cache

    def fun(z):
        return evaluate(z)["r"]

    def jac(z):
        return evaluate(z)["J"]

    try:
        res = least_squares(fun, z0, jac=jac, bounds=(lo, hi), method="trf", x_scale="jac",
                            max_nfev=problem.max_evaluations, **TOLERANCES)
    except (ValueError, ArithmeticError, FloatingPointError, np.linalg.LinAlgError) as err:
        return StartOutcome(index, x0, x0, math.inf, FAILED, f"the optimiser stopped: {err}",
                            counts["evaluations"], counts["failed"], time.perf_counter() - started)
    final = evaluate(res.x)
    x = _to_natural(problem, res.x).tolist()
    if not final["ok"]:
        status, ssr = FAILED, math.inf
        where = "start" if counts["failed"] == counts["evaluations"] else "final point"
        message = f"the model could not be solved at the {where}: {counts['why']}"
    else:
        ssr = float(np.dot(final["r"], final["r"]))
        status = CONVERGED if res.status > 0 else MAX_EVALUATIONS
        message = res.message if res.status > 0 else \
            f"stopped after {problem.max_evaluations} model evaluations before converging"
        if counts["failed"]:
            message += f"; {counts['failed']} trial point(s) could not be solved ({counts['why']})"
    return StartOutcome(index, x0, x, ssr, status, message, counts["evaluations"], counts["failed"],
                        time.perf_counter() - started)


# ---------------------------------------------------------------------------------------------
# Summary

@dataclass
class Estimate:
    names: list
    x: np.ndarray                 # estimates (natural units); NaN when every start failed
    standard_error: np.ndarray    # NaN where not determined
    ci95: np.ndarray              # (m, 2)
    at_bound: list
    correlation: np.ndarray       # (m, m), NaN where not determined
    covariance: np.ndarray
    sum_of_squares: float         # weighted (the objective)
    chi_square: float
    chi_square_p: float
    dof: int
    aic: float
    bic: float
    points: int
    condition_number: float       # of the column-normalised information J^T J
    warnings: list
    starts: list                  # StartOutcome, sorted by sum_of_squares (failed last)
    reached_best: int             # starts within SAME_OPTIMUM of the best sum of squares
    experiments: list = field(default_factory=list)  # JSON-ready dicts
    caution: str = CAUTION

    def to_json(self) -> dict:
        unknowns = []
        for j, name in enumerate(self.names):
            se, x = self.standard_error[j], self.x[j]
            rel = se / abs(x) if math.isfinite(se) and math.isfinite(x) and x != 0 else math.nan
            unknowns.append({"name": name, "estimate": _json_float(x), "standard_error": _json_float(se),
                             "relative_standard_error": _json_float(rel),
                             "ci95": _json_list(self.ci95[j]), "at_bound": bool(self.at_bound[j])})
        return {"unknowns": unknowns, "correlation": _json_matrix(self.correlation),
                "sum_of_squares": _json_float(self.sum_of_squares), "chi_square": _json_float(self.chi_square),
                "chi_square_p": _json_float(self.chi_square_p), "dof": int(self.dof),
                "aic": _json_float(self.aic), "bic": _json_float(self.bic), "points": int(self.points),
                "condition_number": _json_float(self.condition_number), "warnings": list(self.warnings),
                "starts": [s.to_json() for s in self.starts], "reached_best": int(self.reached_best),
                "experiments": self.experiments, "caution": self.caution}


def _sort_key(s: StartOutcome):
    bad = s.status == FAILED or not math.isfinite(s.sum_of_squares)
    return (bad, s.sum_of_squares if not bad else math.inf, s.index)


def _fine_grid(times: np.ndarray, span: tuple) -> np.ndarray:
    """FINE_POINTS times over the span, log-spaced when the data span two or more decades."""
    t0, t1 = span
    pos = times[times > 0]
    if t0 >= 0 and len(pos) and pos.max() / pos.min() >= 100:
        first = min(pos.min(), t1) / 2
        grid = np.geomspace(first, t1, FINE_POINTS - (1 if t0 < first else 0))
        return np.concatenate([[t0], grid]) if t0 < first else grid
    return np.linspace(t0, t1, FINE_POINTS)


def _statistics(J: np.ndarray, ssr: float, dof: int, dxdz: np.ndarray):
    """(covariance, condition number, determined mask) in natural units; J in scaled variables."""
    m = J.shape[1]
    norms = np.linalg.norm(J, axis=0)
    cov = np.full((m, m), np.nan)
    live = norms > 0
    determined = np.zeros(m, dtype=bool)
    if not live.any():
        return cov, math.inf, determined
    Jn = J[:, live] / norms[live]
    _, S, Vt = np.linalg.svd(Jn, full_matrices=False)
    cond = (S[0] / S[-1]) ** 2 if S[-1] > 0 else math.inf
    keep = S > SINGULAR * S[0]
    V = Vt.T
    inv = (V[:, keep] / S[keep] ** 2) @ V[:, keep].T   # (Jn^T Jn)^+
    undetermined = np.abs(V[:, ~keep]).max(axis=1) > 1e-6 if (~keep).any() else np.zeros(live.sum(), bool)
    s2 = ssr / dof if dof > 0 else math.nan
    idx = np.flatnonzero(live)
    scale = dxdz[idx] / norms[idx]
    sub = s2 * inv * np.outer(scale, scale)
    ok = ~undetermined
    determined[idx[ok]] = True
    for a, i in enumerate(idx):
        for b, k in enumerate(idx):
            if ok[a] and ok[b]:
                cov[i, k] = sub[a, b]
    if len(live) and not live.all():
        cond = math.inf
    return cov, cond, determined


def summarise(problem: Problem, outcomes: list) -> Estimate:
    """Best estimate over ``outcomes`` (from :func:`run_start`), its statistics, warnings and
    fitted curves. Problems that ``check`` refuses raise ValueError (check first)."""
    issues = check(problem)
    if issues:
        raise ValueError("; ".join("/".join(map(str, i.path)) + ": " + i.message for i in issues[:5]))
    ev = _evaluator(problem)
    names = [u.name for u in problem.unknowns]
    m, N = len(names), ev.points
    dof = N - m
    ordered = sorted(outcomes, key=_sort_key)
    good = [s for s in ordered if s.status != FAILED and math.isfinite(s.sum_of_squares)]
    warnings: list[str] = []
    failed_solves = sum(s.failed_solves for s in outcomes)
    failed_starts = sum(1 for s in outcomes if s.status == FAILED)
    nan_m = np.full(m, np.nan)
    if not good:
        warnings.append(f"every start failed ({len(outcomes)}): no estimate. "
                        + (ordered[0].message if ordered else "no starts were run"))
        return Estimate(names, nan_m, nan_m.copy(), np.full((m, 2), np.nan), [False] * m,
                        np.full((m, m), np.nan), np.full((m, m), np.nan), math.nan, math.nan, math.nan,
                        dof, math.nan, math.nan, N, math.nan, warnings, ordered, 0,
                        _experiments_json(problem, ev, None, None, None))
    best = good[0]
    x = np.asarray(best.x, dtype=float)
    solved, why = ev.solve(x)
    r, Jx, ok, why = ev.residuals(x, solved) if solved is not None else ev.residuals(x)
    if not ok:  # cannot happen for a start that ended with a finite sum of squares; be safe
        warnings.append(f"the model could not be solved again at the estimate: {why}")
        r = np.full(N, np.nan)
    ssr = float(np.dot(r, r))
    z = _to_scaled(problem, x)
    log = np.array([u.scale == "log" for u in problem.unknowns])
    dxdz = np.where(log, x * math.log(10.0), 1.0)
    cov, cond, determined = _statistics(Jx * dxdz[None, :], ssr, dof, dxdz)
    se = np.sqrt(np.where(np.diag(cov) >= 0, np.diag(cov), np.nan))
    tq = float(student_t.ppf(0.975, dof)) if dof > 0 else math.nan
    ci = np.column_stack([x - tq * se, x + tq * se])
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = cov / np.outer(se, se)
    np.fill_diagonal(corr, np.where(determined, 1.0, np.nan))
    lo, hi = _scaled_bounds(problem)
    tol = 1e-6 * np.maximum(hi - lo, 1e-300)
    at_bound = [bool(z[j] - lo[j] <= tol[j] or hi[j] - z[j] <= tol[j]) for j in range(m)]

    # warnings
    for j, name in enumerate(names):
        if at_bound[j]:
            side = "lower" if z[j] - lo[j] <= tol[j] else "upper"
            warnings.append(f"{name} = {x[j]:.6g} is at its {side} bound: widen the bound if the model "
                            "allows it; its interval assumes an interior optimum and is not valid")
    if dof <= 0:
        warnings.append(f"{N} measurements for {m} unknowns leave no degrees of freedom: no residual "
                        "variance, so no standard errors or intervals")
    if np.linalg.norm(Jx, axis=0).min() == 0:
        for j in np.flatnonzero(np.linalg.norm(Jx, axis=0) == 0):
            warnings.append(f"{names[j]} has no effect on any measured value: it cannot be estimated "
                            "from these data")
    elif cond > ILL_CONDITIONED:
        warnings.append(f"the information matrix is nearly singular (condition number {cond:.3g}): some "
                        "combination of unknowns is poorly determined by the data")
    for j, name in enumerate(names):
        if not determined[j] and dof > 0 and np.linalg.norm(Jx[:, j]) > 0:
            warnings.append(f"{name} is not determined by the data (it moves along a direction the "
                            "measurements do not see): no standard error")
        elif determined[j] and math.isfinite(se[j]) and x[j] != 0 and se[j] / abs(x[j]) > 1:
            warnings.append(f"{name} is practically non-identifiable: its standard error "
                            f"({se[j]:.3g}) exceeds its value ({x[j]:.3g})")
    for i in range(m):
        for k in range(i + 1, m):
            if math.isfinite(corr[i, k]) and abs(corr[i, k]) > STRONG_CORRELATION:
                warnings.append(f"{names[i]} and {names[k]} are strongly correlated ({corr[i, k]:+.4f}): "
                                "the data determine a combination of them better than either alone")
    same = best.sum_of_squares * (1 + SAME_OPTIMUM) + SAME_OPTIMUM_ABS * N
    reached = sum(1 for s in good if s.sum_of_squares <= same)
    if len(outcomes) > 1 and reached < len(good):
        warnings.append(f"{reached} of {len(outcomes)} starts reached the best sum of squares; the others "
                        "ended at other local optima or stopped early (see the starts)")
    if failed_starts:
        warnings.append(f"{failed_starts} of {len(outcomes)} starts failed")
    if failed_solves:
        warnings.append(f"{failed_solves} trial points could not be solved and were penalised")
    if any(s.status == MAX_EVALUATIONS for s in good[:1]):
        warnings.append("the best start stopped at the evaluation limit before converging: raise "
                        "max_evaluations")

    sig = ev.sigma
    neg2lnl = ssr + float(np.sum(np.log(2 * math.pi * sig ** 2)))
    p_value = float(chi2_distribution.sf(ssr, dof)) if dof > 0 else math.nan
    return Estimate(names, x, se, ci, at_bound, corr, cov, ssr, ssr, p_value, dof,
                    neg2lnl + 2 * m, neg2lnl + m * math.log(N), N, cond, warnings, ordered, reached,
                    _experiments_json(problem, ev, x, r, solved))


def _experiments_json(problem: Problem, ev: _Evaluator, x, r, solved) -> list:
    """Per experiment: the data, the fitted values at the data times (from the solve the
    statistics used), raw and weighted residuals, and the fitted curves on a fine grid."""
    out = []
    offset = 0
    for number, (e, setup) in enumerate(zip(problem.experiments, ev.setups)):
        times = setup.times
        observed = {c.observable: _json_list(np.asarray(e.observed[c.observable], dtype=float))
                    for c in setup.columns}
        item = {"name": e.name, "times": _json_list(times), "observed": observed,
                "fitted": {}, "residuals": {}, "weighted_residuals": {},
                "fine": {"times": [], "fitted": {}}}
        if x is not None:
            at_data = solved[number][0] if solved is not None else None
            grid = _fine_grid(times, setup.span)
            fine = ev.plain(setup, x, grid)
            item["fine"]["times"] = _json_list(grid)
            for c, col in enumerate(setup.columns):
                values = np.asarray(e.observed[col.observable], dtype=float)
                fitted = at_data[:, c] if at_data is not None else np.full(len(times), np.nan)
                item["fitted"][col.observable] = _json_list(fitted)
                item["residuals"][col.observable] = _json_list(values - fitted)
                weighted = np.full(len(times), np.nan)
                weighted[col.rows] = r[offset:offset + len(col.rows)]
                offset += len(col.rows)
                item["weighted_residuals"][col.observable] = _json_list(weighted)
                item["fine"]["fitted"][col.observable] = _json_list(fine[:, c]) if fine is not None \
                    else [None] * len(grid)
        out.append(item)
    return out


def fit(problem: Problem, count: int = 10, seed: int = 0) -> Estimate:
    """Every start in this process, one after the other, and their summary (the service fans
    the starts out over its workers instead)."""
    points = starts(problem, count, seed)
    return summarise(problem, [run_start(problem, i, x0) for i, x0 in enumerate(points)])


__all__ = ["CAUTION", "Estimate", "StartOutcome", "fit", "run_start", "starts", "summarise"]
