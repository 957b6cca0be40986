"""Public entry point of the integrators: ``integrate(kernel, ...) -> Solution``.

TEMPORARY BACKEND: SciPy LSODA driving the register-machine kernel from Python.
The engine's own compiled integrators replace the body of :func:`integrate`;
the signature and the :class:`Solution` shape are the contract the worker uses.
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Callable, Optional

import numpy as np
from scipy.integrate import solve_ivp

from engine import vm

METHODS = ("auto", "dopri5", "radau5", "rodas")

# Named outcomes. The strings are part of the wire format.
SUCCEEDED = "succeeded"
TOLERANCE_UNREACHABLE = "tolerance_unreachable"
STEP_UNDERFLOW = "step_underflow"
NEWTON_FAILURE = "newton_failure"
STEP_LIMIT = "step_limit"
TIME_LIMIT = "time_limit"
CANCELLED = "cancelled"
NON_FINITE = "non_finite"


@dataclass(frozen=True)
class SolverOptions:
    method: str = "auto"
    rtol: float = 1e-6
    atol: np.ndarray | float = 1e-10  # scalar or per state
    max_steps: int = 1_000_000
    max_wall_seconds: float = 3600.0
    nonnegative: bool = False
    first_step: Optional[float] = None


@dataclass
class Solution:
    t: np.ndarray                  # (m,) output times reached
    y: np.ndarray                  # (m, n) states at those times
    aux: np.ndarray                # (m, n_aux) intermediate quantities
    outcome: str                   # one of the named outcomes above
    message: str                   # what happened and what to do
    t_reached: float
    y_reached: np.ndarray
    report: dict = field(default_factory=dict)  # JSON-safe diagnostics


# monitor(fraction_done) -> True to stop (cancellation); called at most every 0.5 s.
Monitor = Callable[[float], bool]


def integrate(
    kernel: vm.Kernel,
    p: np.ndarray,
    y0: np.ndarray,
    t_span: tuple[float, float],
    t_out: np.ndarray,
    options: SolverOptions = SolverOptions(),
    monitor: Optional[Monitor] = None,
    conservation: Optional[np.ndarray] = None,
) -> Solution:
    t0, t1 = float(t_span[0]), float(t_span[1])
    regs = np.zeros(kernel.n_regs)
    p = np.asarray(p, dtype=float)
    out = np.empty(kernel.n)
    vals = np.empty(len(kernel.jac_rows))
    J = np.empty((kernel.n, kernel.n))
    started = time.perf_counter()
    last_beat = [started]
    stop = [None]

    class _Stop(Exception):
        pass

    def f(t, y):
        now = time.perf_counter()
        if now - last_beat[0] >= 0.5:
            last_beat[0] = now
            if now - started > options.max_wall_seconds:
                stop[0] = TIME_LIMIT
                raise _Stop
            if monitor is not None and monitor((t - t0) / (t1 - t0)):
                stop[0] = CANCELLED
                raise _Stop
        vm.rhs(kernel, t, y, p, regs, out)
        return out.copy()

    def jac(t, y):
        vm.jac_dense(kernel, t, y, p, regs, vals, J)
        return J.copy()

    t_eval = np.asarray(t_out, dtype=float)
    try:
        sol = solve_ivp(f, (t0, t1), np.asarray(y0, dtype=float), method="LSODA",
                        t_eval=t_eval, jac=jac, rtol=options.rtol, atol=options.atol)
        outcome = SUCCEEDED if sol.status == 0 else STEP_UNDERFLOW
        message = "integrated to the end of the span" if sol.status == 0 else sol.message
        t_res, y_res = sol.t, sol.y.T
        nfev, njev, nsteps = int(sol.nfev), int(sol.njev), int(len(sol.t))
    except _Stop:
        outcome = stop[0]
        message = {"cancelled": "cancelled on request",
                   "time_limit": "wall-time limit reached; raise limits.max_wall_seconds"}[outcome]
        t_res, y_res = np.zeros(0), np.zeros((0, kernel.n))
        nfev = njev = nsteps = 0
    aux = np.empty((len(t_res), kernel.n_aux))
    for i in range(len(t_res)):
        vm.aux(kernel, t_res[i], y_res[i], p, regs, aux[i])
    y_end = y_res[-1] if len(t_res) else np.asarray(y0, dtype=float)
    return Solution(
        t=t_res, y=y_res, aux=aux, outcome=outcome, message=message,
        t_reached=float(t_res[-1]) if len(t_res) else t0, y_reached=y_end,
        report={"method_backend": "scipy-lsoda", "rhs_evaluations": nfev,
                "jacobian_evaluations": njev, "output_points": nsteps,
                "solve_seconds": time.perf_counter() - started},
    )
