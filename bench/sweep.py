"""Parameter sweeps: prepare once, integrate many members (the throughput a sweep job sees)."""
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
    integrate(pm.kernel, p, pm.y0, (0.0, problem.t_end), t_out, opts)  # warm-up
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
            "note": "one process; k1 in [0.02, 0.08]; span [0, 1e11]; end point only"}
