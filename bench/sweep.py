"""Parameter sweeps: prepare once, integrate many members (the throughput a sweep job sees).

The engine's sweep is compared, at matched accuracy, with the loop a user would write
otherwise: SciPy's odeint (Fortran LSODA) with a numba-compiled right-hand side and
Jacobian, called once per member. Matched: odeint runs at the loosest rtol whose digits on
the base member reach the engine's (digits against the published end values).
"""
from __future__ import annotations

import time

import numpy as np

from bench import problems as PR


def robertson_sweep(members: int = 2000, rtol: float = 1e-6, cap: float = 30.0) -> dict:
    """Robertson over [0, 1e11] with k1 varied over members, one process (one core).

    Stops after ``cap`` seconds and reports the members done by then.
    """
    from engine.integrate import SolverOptions, integrate
    problem = PR.build("robertson")
    pm = PR.prepare_problem(problem)
    opts = SolverOptions(method="auto", rtol=rtol, atol=problem.atol(rtol), diagnostics="counts",
                         max_wall_seconds=cap)
    t_out = np.array([problem.t_end])
    k1 = np.linspace(0.02, 0.08, members)
    p = np.array(pm.p, dtype=float)
    i_k1 = pm.param_names.index("k1")
    base = integrate(pm.kernel, p, pm.y0, (0.0, problem.t_end), t_out, opts)  # warm-up
    base_digits = _base_digits(base.y[-1], problem) if base.outcome == "succeeded" else None
    failed = done = 0
    started = time.perf_counter()
    for k in k1:
        p[i_k1] = k
        sol = integrate(pm.kernel, p, pm.y0, (0.0, problem.t_end), t_out, opts)
        failed += sol.outcome != "succeeded"
        done += 1
        if time.perf_counter() - started > cap:
            break
    secs = time.perf_counter() - started
    return {"problem": "robertson", "members": done, "rtol": rtol, "method": "auto",
            "seconds": secs, "solves_per_second": done / secs, "failed": failed,
            "digits": base_digits, "diagnostics": "counts",
            "note": "one process; k1 in [0.02, 0.08]; span [0, 1e11]; end point only; lean "
                    "diagnostics (counts) and the model prepared once, as a batch runs",
            "odeint": odeint_sweep(members, base_digits, cap)}


def _base_digits(y, problem) -> float | None:
    from bench.matching import digits
    return digits(y, problem.published, problem.floor)


def odeint_sweep(members: int, engine_digits: float | None, cap: float = 30.0) -> dict:
    """Robertson with k1 varied, one odeint + numba call per member, at matched digits."""
    import warnings

    from scipy.integrate import odeint

    from bench import jitted
    problem = PR.build("robertson")
    y0 = np.array(PR.prepare_problem(problem).y0)
    f, df = jitted.robertson_f, jitted.robertson_df
    p = np.array(problem.p_jit, dtype=float)

    def solve(params, rtol):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            y, info = odeint(f, y0, [0.0, problem.t_end], args=(params,), Dfun=df, tfirst=True,
                             rtol=rtol, atol=problem.atol(rtol), mxstep=5_000_000, full_output=True)
        return y[-1], info["message"] == "Integration successful."

    chosen = None
    for rtol in (1e-6, 1e-7, 1e-8, 1e-9, 1e-10, 1e-11, 1e-12):
        y, ok = solve(p, rtol)
        d = _base_digits(y, problem) if ok else None
        if d is not None and (engine_digits is None or d >= engine_digits):
            chosen = (rtol, d)
            break
    if chosen is None:
        return {"members": 0, "note": "odeint reached no rtol matching the engine's digits"}
    rtol, d = chosen
    k1 = np.linspace(0.02, 0.08, members)
    failed = done = 0
    started = time.perf_counter()
    for k in k1:
        p[0] = k
        _, ok = solve(p, rtol)
        failed += not ok
        done += 1
        if time.perf_counter() - started > cap:
            break
    secs = time.perf_counter() - started
    return {"members": done, "rtol": rtol, "digits": d, "seconds": secs,
            "solves_per_second": done / secs, "failed": failed,
            "note": "odeint (LSODA) + numba rhs and Jacobian, one call per member, one process"}
