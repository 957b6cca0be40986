"""Parameter estimation against its baselines: ``python -m bench.estimation``.

The alpha-pinene problem (Box, Hunter, MacGregor & Erjavec 1973; data as in
tests/calibration/references.py) with 20 starts from a Latin hypercube over three decades of
each rate constant, fitted

- by ``calibration`` in this process (exact residual Jacobian from forward sensitivities;
  the starts one after the other, as one worker would run them);
- by ``scipy.optimize.least_squares`` around ``scipy.integrate.solve_ivp`` (BDF) with the
  Jacobian by finite differences (the baseline);
- by ``least_squares`` around ``scipy.integrate.odeint`` (LSODA) with a numba right-hand side
  and Jacobian, again with finite differences (the strong baseline);

all three in the same scaled variables (log10 of each rate constant), with the same bounds,
starts and least-squares tolerances. A method "reaches" the optimum when its best sum of
squares is within 1e-6 (relative) of the best of all three. NIST BoxBOD and Misra1a (NIST's
two starts each) are fitted by ``calibration`` only and compared with the certified values.

``records()`` returns one record per problem in the shape bench/results/latest.json uses for
``estimation`` (its ``seconds`` here are in-process, not through the service).
"""
from __future__ import annotations

from pathlib import Path

from engine.cache import configure

configure(Path(__file__).resolve().parent.parent / "var" / "numba-cache")

import math  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402
from scipy.integrate import odeint, solve_ivp  # noqa: E402
from scipy.optimize import least_squares  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
from calibration.fit import TOLERANCES, run_start, starts, summarise  # noqa: E402
from calibration.problem import Experiment, Problem, Unknown  # noqa: E402
from tests.calibration import references as R  # noqa: E402

STARTS = 20
SEED = 1
RTOL, ATOL = 1e-8, 1e-12   # every method's integration tolerances
SAME = 1e-6                 # relative difference of sum of squares counted as the same optimum
Y0 = np.array([100.0, 0.0, 0.0, 0.0, 0.0])
LOWER, UPPER = 1e-6, 1e-3   # per minute, each rate constant


def pinene_problem() -> Problem:
    e = Experiment("box1973", (0.0, float(R.PINENE_TIMES[-1])), R.PINENE_TIMES,
                   {f"y{i + 1}": R.PINENE_DATA[:, i] for i in range(5)})
    unknowns = tuple(Unknown(f"p{i}", LOWER, UPPER) for i in range(1, 6))
    return Problem(R.PINENE_MODEL, (e,), {f"y{i}": f"y{i}" for i in range(1, 6)}, {}, unknowns,
                   rtol=RTOL, atol=ATOL)


def ours(problem: Problem, x0: np.ndarray) -> dict:
    t0 = time.perf_counter()
    outcomes = [run_start(problem, i, x) for i, x in enumerate(x0)]
    est = summarise(problem, outcomes)
    seconds = time.perf_counter() - t0
    ssr = np.array([o.sum_of_squares for o in outcomes])
    return {"seconds": seconds, "best": float(np.min(ssr)), "ssr": ssr, "x": est.x,
            "evaluations": sum(o.evaluations for o in outcomes), "estimate": est}


def _fit_fd(x0: np.ndarray, solve) -> dict:
    """least_squares with a 2-point finite-difference Jacobian around ``solve(p) -> (8, 5)``."""
    lo, hi = np.log10(np.full(5, LOWER)), np.log10(np.full(5, UPPER))
    calls = [0]

    def residuals(z):
        calls[0] += 1
        y = solve(10.0 ** z)
        if y is None:
            return np.full(40, 1e5)
        return (R.PINENE_DATA - y).ravel()

    t0 = time.perf_counter()
    ssr = []
    for x in x0:
        try:
            res = least_squares(residuals, np.clip(np.log10(x), lo, hi), bounds=(lo, hi), method="trf",
                                x_scale="jac", max_nfev=200, **TOLERANCES)
            ssr.append(2 * res.cost)
        except Exception:  # noqa: BLE001 - a baseline's failure is a result
            ssr.append(math.inf)
    ssr = np.array(ssr)
    return {"seconds": time.perf_counter() - t0, "best": float(np.min(ssr)), "ssr": ssr,
            "evaluations": calls[0]}


def _ivp(p):
    A = R.pinene_matrix(p)
    sol = solve_ivp(lambda t, y: A @ y, (0.0, R.PINENE_TIMES[-1]), Y0, method="BDF", t_eval=R.PINENE_TIMES,
                    rtol=RTOL, atol=ATOL, jac=lambda t, y: A)
    return sol.y.T if sol.success else None


def solve_ivp_bdf(x0) -> dict:
    return _fit_fd(x0, _ivp)


def odeint_numba(x0) -> dict:
    import numba

    @numba.njit(cache=False)
    def f(y, t, p):
        p1, p2, p3, p4, p5 = p
        return np.array([-(p1 + p2) * y[0], p1 * y[0], p2 * y[0] - (p3 + p4) * y[2] + p5 * y[4],
                         p3 * y[2], p4 * y[2] - p5 * y[4]])

    @numba.njit(cache=False)
    def jac(y, t, p):
        p1, p2, p3, p4, p5 = p
        J = np.zeros((5, 5))
        J[0, 0] = -(p1 + p2)
        J[1, 0] = p1
        J[2, 0], J[2, 2], J[2, 4] = p2, -(p3 + p4), p5
        J[3, 2] = p3
        J[4, 2], J[4, 4] = p4, -p5
        return J

    times = np.concatenate([[0.0], R.PINENE_TIMES])
    f(Y0, 0.0, np.full(5, 1e-5)), jac(Y0, 0.0, np.full(5, 1e-5))  # compile outside the clock

    def solve(p):
        y, info = odeint(f, Y0, times, args=(p,), Dfun=jac, rtol=RTOL, atol=ATOL, full_output=True,
                         mxstep=100000)
        return y[1:] if info["message"].startswith("Integration successful") else None

    return _fit_fd(x0, solve)


def _digits(value: float, reference: float) -> float:
    return 16.0 if value == reference else -math.log10(abs(value - reference) / abs(reference))


def nist_records() -> list[dict]:
    out = []
    for name, data, bounds in (("boxbod", R.BOXBOD, [(1.0, 1e4), (1e-3, 10.0)]),
                               ("misra1a", R.MISRA1A, [(1.0, 1e4), (1e-6, 1e-1)])):
        x = np.array(data["x"])
        e = Experiment("nist", (0.0, float(x[-1])), x, {"y": np.array(data["y"])})
        problem = Problem(R.EXPONENTIAL_RISE, (e,), {"y": "y"}, {},
                          tuple(Unknown(n, lo, hi) for n, (lo, hi) in zip(("b1", "b2"), bounds)),
                          rtol=1e-10, atol=1e-14)
        t0 = time.perf_counter()
        est = summarise(problem, [run_start(problem, i, s) for i, s in enumerate(data["starts"])])
        seconds = time.perf_counter() - t0
        digits = min(min(_digits(est.x[j], data["certified"][p]),
                         _digits(est.standard_error[j], data["certified_sd"][p]))
                     for j, p in enumerate(("b1", "b2")))
        out.append({"problem": name, "estimates": dict(zip(("b1", "b2"), est.x.tolist())),
                    "standard_errors": dict(zip(("b1", "b2"), est.standard_error.tolist())),
                    "reference": dict(data["certified"]), "reference_sd": dict(data["certified_sd"]),
                    "digits": round(digits, 2), "sum_of_squares": est.sum_of_squares, "seconds": seconds,
                    "where": "in-process", "baseline": None, "baseline_seconds": None,
                    "strong_baseline_seconds": None, "status": "ok" if digits >= 6 else "mismatch"})
    return out


def pinene_record(ours_run=None, ivp=None, strong=None) -> dict:
    problem = pinene_problem()
    x0 = starts(problem, STARTS, seed=SEED)
    ours_run = ours_run or ours(problem, x0)
    ivp = ivp or solve_ivp_bdf(x0)
    strong = strong or odeint_numba(x0)
    best = min(ours_run["best"], ivp["best"], strong["best"])
    reached = {k: int(np.sum(r["ssr"] <= best * (1 + SAME))) for k, r in
               (("ours", ours_run), ("solve_ivp", ivp), ("odeint", strong))}
    names = [f"p{i}" for i in range(1, 6)]
    digits = min(_digits(v, R.PINENE_PUBLISHED[n]) for n, v in zip(names, ours_run["x"]))
    same = all(abs(r["best"] - best) <= SAME * best for r in (ours_run, ivp, strong))
    return {"problem": "alpha_pinene", "estimates": dict(zip(names, ours_run["x"].tolist())),
            "reference": {n: R.PINENE_PUBLISHED[n] for n in names}, "digits": round(digits, 2),
            "sum_of_squares": ours_run["best"], "seconds": ours_run["seconds"], "where": "in-process",
            "starts": STARTS, "reached_best": reached,
            "evaluations": {"ours": ours_run["evaluations"], "solve_ivp": ivp["evaluations"],
                            "odeint": strong["evaluations"]},
            "baseline": "least_squares + solve_ivp(BDF), finite-difference Jacobian",
            "baseline_seconds": ivp["seconds"], "baseline_sum_of_squares": ivp["best"],
            "strong_baseline": "least_squares + odeint(LSODA) with numba f and Jacobian, finite differences",
            "strong_baseline_seconds": strong["seconds"], "strong_baseline_sum_of_squares": strong["best"],
            "status": "ok" if same else "different optimum"}


def records() -> list[dict]:
    return nist_records() + [pinene_record()]


def main() -> None:
    problem = pinene_problem()
    x0 = starts(problem, STARTS, seed=SEED)
    t0 = time.perf_counter()
    cold = ours(problem, x0)  # prepares the sensitivity model (content-cached afterwards)
    cold_total = time.perf_counter() - t0
    warm = min((ours(problem, x0) for _ in range(3)), key=lambda r: r["seconds"])
    ivp = solve_ivp_bdf(x0)
    strong = odeint_numba(x0)
    rec = pinene_record(warm, ivp, strong)
    best = min(warm["best"], ivp["best"], strong["best"])
    print(f"alpha-pinene, {STARTS} starts over [{LOWER:g}, {UPPER:g}] per rate constant, rtol {RTOL:g}, "
          f"atol {ATOL:g}; best sum of squares {best:.10g}\n")
    print("| method | seconds | per start (ms) | best sum of squares | starts at best | model solves | vs ours |")
    print("|---|---:|---:|---:|---:|---:|---:|")
    rows = [("calibration (exact Jacobian), first run", cold_total, cold, "ours"),
            ("calibration (exact Jacobian), prepared", warm["seconds"], warm, "ours"),
            ("least_squares + solve_ivp BDF, FD", ivp["seconds"], ivp, "solve_ivp"),
            ("least_squares + odeint + numba, FD", strong["seconds"], strong, "odeint")]
    for label, seconds, run, key in rows:
        print(f"| {label} | {seconds:.3f} | {1000 * seconds / STARTS:.1f} | {run['best']:.10g} | "
              f"{int(np.sum(run['ssr'] <= best * (1 + SAME)))}/{STARTS} | {run['evaluations']} | "
              f"{seconds / warm['seconds']:.1f}x |")
    print()
    print("estimates:", ", ".join(f"{k} = {v:.5g}" for k, v in rec["estimates"].items()),
          f"(published about {', '.join(f'{R.PINENE_PUBLISHED[k]:.3g}' for k in rec['estimates'])})")
    print(f"status: {rec['status']}\n")
    print("| NIST problem | digits (estimates and sd, fewest) | sum of squares | seconds |")
    print("|---|---:|---:|---:|")
    for r in nist_records():
        print(f"| {r['problem']} | {r['digits']:.1f} | {r['sum_of_squares']:.10g} | {r['seconds']:.3f} |")


if __name__ == "__main__":
    main()
