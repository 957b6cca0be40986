"""Speed of the engine's integrators (a benchmark, not a test).

Run: PYTHONPATH=. python bench/engine_speed.py [--quick] [--no-sparse]
Prints per-solve times (median) at rtol 1e-6, atol 1e-10, one core, for the
small stiff problems against SciPy odeint with numba-compiled rhs and Jacobian,
Robertson solves per second with the kernel prepared once, auto vs pinned
Dormand-Prince on non-stiff problems, and (if present) the sparse Brusselator.
"""
from __future__ import annotations

import sys
import time

import numpy as np
from numba import njit
from scipy.integrate import odeint

from bench import jitted as J
from engine.integrate import SolverOptions, integrate
from tests.engine import kernels as K

RTOL, ATOL = 1e-6, 1e-10


@njit(cache=True)
def vdp_f(t, y, p):
    """Van der Pol, unscaled, mu = p[0] (the form of tests/engine/kernels.py)."""
    return np.array([y[1], p[0] * (1 - y[0] ** 2) * y[1] - y[0]])


@njit(cache=True)
def vdp_df(t, y, p):
    return np.array([[0.0, 1.0], [-2.0 * p[0] * y[0] * y[1] - 1.0, p[0] * (1 - y[0] ** 2)]])


# odeint peers: (f, Dfun, args), all tfirst; Robertson and HIRES share bench/jitted.py's code
STIFF = [("robertson", K.ROBERTSON, 1e5, (J.robertson_f, J.robertson_df, (np.array([0.04, 3e7, 1e4]),))),
         ("hires", K.HIRES, K.HIRES_END, (J.hires_f, J.hires_df, (np.array([280.0]),))),
         ("van_der_pol", K.VAN_DER_POL, 3000.0, (vdp_f, vdp_df, (np.array([1000.0]),)))]


def median_time(fn, repeat):
    fn()
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times))


def stiff_table(repeat):
    print(f"small stiff problems, rtol {RTOL:g}, atol {ATOL:g}: median ms per solve")
    print(f"{'problem':12s} {'odeint':>8s} " + " ".join(f"{m:>8s}" for m in
                                                     ("auto", "radau_iia_5", "rosenbrock_4", "lean")))
    for name, spec, t_end, (f, j, args) in STIFF:
        m = K.model(spec)
        t_out = np.array([0.0, t_end])
        ref = median_time(lambda: odeint(f, m.y0, t_out, args=args, Dfun=j, tfirst=True, rtol=RTOL,
                                         atol=ATOL, mxstep=100000), repeat)
        row = [ref]
        for method, diag in (("auto", "full"), ("radau_iia_5", "full"), ("rosenbrock_4", "full"),
                             ("auto", "counts")):
            o = SolverOptions(method=method, rtol=RTOL, atol=ATOL, diagnostics=diag)
            row.append(median_time(lambda: integrate(m.kernel, m.p, m.y0, (0.0, t_end),
                                                     t_out, o), repeat))
        print(f"{name:12s} " + " ".join(f"{1e3 * v:8.3f}" for v in row)
              + f"   odeint/auto = {row[0] / row[1]:.1f}x, odeint/lean = {row[0] / row[4]:.1f}x")


def throughput(seconds=2.0):
    m = K.model(K.ROBERTSON)
    t_out = np.array([40.0])
    for diag in ("counts", "full"):
        o = SolverOptions(method="auto", rtol=RTOL, atol=ATOL, diagnostics=diag)
        integrate(m.kernel, m.p, m.y0, (0.0, 40.0), t_out, o)
        n, t0 = 0, time.perf_counter()
        while time.perf_counter() - t0 < seconds:
            integrate(m.kernel, m.p, m.y0, (0.0, 40.0), t_out, o)
            n += 1
        print(f"Robertson to t=40, auto, diagnostics={diag}: "
              f"{n / (time.perf_counter() - t0):.0f} solves/s")


def call_overhead(n=3000):
    """Time of an integrate() call that takes one step: the Python cost per call."""
    m = K.model(K.ROBERTSON)
    t_out = np.array([1e-9])
    for diag in ("counts", "full"):
        o = SolverOptions(method="rosenbrock_4", rtol=RTOL, atol=ATOL, diagnostics=diag)
        integrate(m.kernel, m.p, m.y0, (0.0, 1e-9), t_out, o)
        best = np.inf
        for _ in range(5):
            t0 = time.perf_counter()
            for _ in range(n // 5):
                integrate(m.kernel, m.p, m.y0, (0.0, 1e-9), t_out, o)
            best = min(best, (time.perf_counter() - t0) / (n // 5))
        print(f"integrate() call taking one step, diagnostics={diag}: {1e6 * best:.1f} us")


def nonstiff(repeat):
    print("non-stiff: auto vs pinned dormand_prince_54 (median ms)")
    for name, spec, t_end in (("arenstorf", K.ARENSTORF, K.ARENSTORF_PERIOD),
                              ("lorenz", K.LORENZ, 20.0)):
        m = K.model(spec)
        t_out = np.linspace(0, t_end, 101)
        res = {}
        for method in ("dormand_prince_54", "auto"):
            o = SolverOptions(method=method, rtol=RTOL, atol=ATOL)
            res[method] = median_time(lambda: integrate(m.kernel, m.p, m.y0, (0.0, t_end),
                                                        t_out, o), repeat)
        print(f"{name:10s} dormand_prince_54 {1e3 * res['dormand_prince_54']:.3f}  auto {1e3 * res['auto']:.3f}"
              f"  ratio {res['auto'] / res['dormand_prince_54']:.2f}")


def brusselator():
    try:
        from tests.engine.kernels import brusselator_2d
    except ImportError:
        print("brusselator: no sparse test model yet")
        return
    for N in (32,):
        m = brusselator_2d(N)
        o = SolverOptions(method="auto", rtol=RTOL, atol=ATOL)
        t0 = time.perf_counter()
        sol = integrate(m.kernel, m.p, m.y0, (0.0, 10.0), np.array([10.0]), o)
        print(f"brusselator 2x{N}^2: {time.perf_counter() - t0:.3f} s, {sol.outcome}, "
              f"{sol.report['accepted_steps']} steps")


if __name__ == "__main__":
    quick = "--quick" in sys.argv
    stiff_table(5 if quick else 20)
    throughput(1.0 if quick else 3.0)
    call_overhead()
    nonstiff(5 if quick else 20)
    if "--no-sparse" not in sys.argv:
        brusselator()
