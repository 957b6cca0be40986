"""Public entry point of the integrators: ``integrate(kernel, ...) -> Solution``.

Methods: "dormand_prince_54" (Dormand-Prince 5(4), explicit), "radau_iia_5" (Radau IIA order
5, implicit), "rosenbrock_4" (Rosenbrock, order 4) and "auto" (starts explicit and
switches by the policy of :mod:`engine.integrators.switching`). The compiled loop
(:mod:`engine.integrators.driver`) runs in chunks; between chunks this wrapper calls the
monitor, enforces the wall-time limit and resumes. The report vocabulary is
documented in docs/engine.md.
"""
from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from typing import Callable, Optional

import numpy as np

from engine.integrators.sparse import bdf, core as sparse, radau as sparse_radau
from engine.integrators import driver, state as S
from engine.kernels import native, vm
from engine.diagnostics.report import aux_at_outputs, build_report
from engine.integrators.switching import P_IMPLICIT, SwitchPolicy
from engine.integrators.tableaux import BDF, DORMAND_PRINCE, METHOD_NAMES, RADAU_IIA, ROSENBROCK

from engine.choices import METHODS  # noqa: E402  (numba-free, read by the API)

# Named outcomes. The strings are part of the wire format.
SUCCEEDED = "succeeded"
TOLERANCE_UNREACHABLE = "tolerance_unreachable"
STEP_UNDERFLOW = "step_underflow"
NEWTON_FAILURE = "newton_failure"
STEP_LIMIT = "step_limit"
TIME_LIMIT = "time_limit"
CANCELLED = "cancelled"
NON_FINITE = "non_finite"
OUTCOMES = (SUCCEEDED, TOLERANCE_UNREACHABLE, STEP_UNDERFLOW, NEWTON_FAILURE, STEP_LIMIT,
            TIME_LIMIT, CANCELLED, NON_FINITE)

MIN_RTOL = 1e-13  # below this, double precision cannot deliver the tolerance
_PINNED = {"auto": -1, "dormand_prince_54": DORMAND_PRINCE, "radau_iia_5": RADAU_IIA, "rosenbrock_4": ROSENBROCK, "bdf": BDF}
_ORDER = {DORMAND_PRINCE: 5, RADAU_IIA: 3, ROSENBROCK: 4, BDF: 1}
_STATUS = {S.DONE: SUCCEEDED, S.ST_STEP_UNDERFLOW: STEP_UNDERFLOW,
           S.ST_NEWTON_FAILURE: NEWTON_FAILURE, S.ST_STEP_LIMIT: STEP_LIMIT,
           S.ST_NON_FINITE: NON_FINITE}
HIST_ROWS = 1024   # step-history buffer (thinned by two when full)
SWITCH_ROWS = 64   # switch-log rows kept (all switches are counted)


@dataclass(frozen=True)
class SolverOptions:
    method: str = "auto"
    rtol: float = 1e-6
    atol: np.ndarray | float = 1e-10  # scalar or per state
    max_steps: int = 1_000_000
    max_wall_seconds: float = 3600.0
    nonnegative: bool | np.ndarray = False  # all states, or a per-state mask
    first_step: Optional[float] = None
    max_step: float = np.inf
    event_directions: Optional[np.ndarray] = None  # per event: +1 rising, -1 falling, 0 both
    event_terminal: Optional[np.ndarray] = None    # per event: True = stop the run there
    max_events: int = 1000                         # event records kept
    diagnostics: str = "full"  # "full" (eigenvalues, history) or "counts" (lean)
    policy: SwitchPolicy = SwitchPolicy()
    # "auto": a run still on the interpreter after TIER_UP_SECONDS (and after longer than
    # its compile would take) continues on machine code (engine.kernels.native), with the same
    # values; "never" (default here; jobs pass their own option): never mid-run
    machine_code: str = "never"


@dataclass
class Solution:
    t: np.ndarray                  # (m,) output times reached
    y: np.ndarray                  # (m, n) states at those times
    aux: np.ndarray                # (m, n_aux) intermediate quantities
    outcome: str                   # one of the named outcomes above
    message: str                   # what happened and what to do
    t_reached: float
    y_reached: np.ndarray
    event_t: np.ndarray = field(default_factory=lambda: np.zeros(0))
    event_index: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    event_y: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    terminal_event: Optional[int] = None   # index of the event that stopped the run
    # when the run moved to machine code mid-way (SolverOptions.machine_code="auto"):
    # {"t": time reached then, "after_seconds": solve time before, "seconds": build time}
    machine_code_from: Optional[dict] = None
    # JSON-safe diagnostics (sol.report); with diagnostics="counts" built on first read
    # from a snapshot of the run's counters: sweep members that never read it skip it
    _report: Optional[dict] = field(default=None, repr=False)
    _report_later: Optional[Callable[[], dict]] = field(default=None, repr=False)

    @property
    def report(self) -> dict:
        if self._report is None:
            self._report = self._report_later() if self._report_later else {}
            self._report_later = None
        return self._report

    @report.setter
    def report(self, value: dict) -> None:
        self._report, self._report_later = value, None


# monitor(fraction_done) -> True to stop (cancellation); called at most every 0.5 s.
Monitor = Callable[[float], bool]


class _Run:
    """All arrays of one run (plain numpy; the compiled loop mutates them).

    Dense-path runs are kept for reuse (see :func:`_take_run`): a sweep calls
    integrate thousands of times with the same shapes, and building some twenty
    arrays costs more than a short solve."""

    def __init__(self, kernel, t_out, o: SolverOptions):
        n, ne = kernel.n, kernel.n_events
        implicit = o.method != "dormand_prince_54"
        self.sparse = o.method == "bdf" or (implicit and sparse.wants_sparse(kernel))
        self.pattern = sparse.Pattern(kernel) if self.sparse else None
        self.sparse_lu = None
        m = n if implicit and not self.sparse else 0
        cap = o.max_events if ne else 0
        hist_rows = HIST_ROWS if o.diagnostics == "full" else 0  # "counts": no history
        # One zeroed buffer per dtype, cut into C-contiguous views.
        (self.y, self.y0, self.regs, self.atol, self.V, self.cont, self.J, self.jv,
         self.LU, self.y_out, self.gv, self.ev_t, self.ev_y, self.swlog, self.hist,
         self.fs) = _carve(np.float64, (n,), (n,), (max(kernel.n_regs, 1),), (n,),
                           (S.N_ROWS, n), (6, n), (m, m), (len(kernel.jac_rows),), (m, m),
                           (len(t_out), n), (4, ne), (cap,), (cap, n), (SWITCH_ROWS, 7),
                           (hist_rows, 4), (S.N_FS,))
        self.piv, self.pivc, self.ev_i, self.iw = _carve(np.int64, (m,), (m,), (cap,),
                                                         (S.N_IW,))
        self.LUc, self.cbuf = _carve(np.complex128, (m, m), (m,))
        self.buffers = [a.base for a in (self.y, self.piv, self.LUc)]
        self.D = np.zeros((bdf.MAX_ORDER + 3, n)) if self.sparse else None
        if self.sparse:  # sparse Radau IIA (engine.integrators.sparse.radau): work rows, complex rhs
            self.sparse_luc = None
            self.radau_work = np.zeros((sparse_radau.N_WORK, n))
            self.radau_c = np.zeros(n, dtype=np.complex128)
        self.fresh = True
        self.pol = self.pol_of = None
        self.no_dir = np.zeros(ne, dtype=np.int64)   # event directions / terminal flags
        self.no_term = np.zeros(ne, dtype=np.bool_)  # when the options give none
        self.code_seen = None
        self.has_time = 0
        self.key = None  # pool key (engine.integrate._pool_key)

    def reset(self, kernel, p, y0, t0, t1, t_out, o: SolverOptions):
        if not self.fresh:
            for buf in self.buffers:
                buf.fill(0)
            if self.D is not None:
                self.D.fill(0.0)
        self.fresh = False
        self.y[:] = y0
        self.y0[:] = y0
        self.atol[:] = o.atol
        self.p = p if _plain(p) else np.array(p, dtype=np.float64)  # a writeable copy
        if self.pol_of is not o.policy:  # a sweep passes the same policy every time
            self.pol, self.pol_of = o.policy.as_array(), o.policy
            if self.sparse:  # stiff phases of auto run the sparse BDF
                self.pol[P_IMPLICIT] = BDF
        if o.nonnegative is not False and o.nonnegative is not None:
            self.V[S.V_NNMASK] = o.nonnegative
        self.t_out = t_out
        self.ev_dir = (self.no_dir if o.event_directions is None
                       else _writeable(o.event_directions, np.int64))
        self.ev_term = (self.no_term if o.event_terminal is None
                        else _writeable(o.event_terminal, np.bool_))
        fs = self.fs
        fs[S.F_T] = fs[S.F_T0] = t0
        fs[S.F_TEND] = t1
        fs[S.F_H] = o.first_step or 0.0
        fs[S.F_HMAX] = min(o.max_step, t1 - t0)
        fs[S.F_RTOL] = o.rtol
        fs[S.F_ERR_OLD] = 1e-4
        fs[S.F_NEWTON_TOL] = max(10 * 2.22e-16 / o.rtol, min(0.03, o.rtol ** 0.5))
        iw = self.iw
        pinned = _PINNED[o.method]
        iw[S.I_PINNED] = pinned
        iw[S.I_METHOD] = DORMAND_PRINCE if pinned < 0 else pinned
        if self.sparse and pinned >= 0:  # large sparse Jacobian: SuperLU (engine.integrators.sparse.core,
            # engine.integrators.sparse.radau, engine.integrators.sparse.bdf); auto starts explicit and switches to
            # the sparse BDF
            iw[S.I_PINNED] = iw[S.I_METHOD] = pinned if pinned in (ROSENBROCK, RADAU_IIA) else BDF
        iw[S.I_MAX_STEPS] = o.max_steps
        # "full" times each method (a switch ends a chunk); the sparse path dispatches
        # between Python and compiled loops at a switch; "counts" runs on through switches
        iw[S.I_SWITCH_RETURNS] = int(o.diagnostics == "full" or self.sparse)
        iw[S.I_HIST_STRIDE] = 1
        iw[S.I_STEPS_IN_METHOD] = o.policy.min_steps  # no hysteresis for the first method
        iw[S.I_FIRST] = 1
        iw[S.I_JAC_CURRENT] = -1
        iw[S.I_NONNEG] = 0 if o.nonnegative is False or o.nonnegative is None \
            else int(self.V[S.V_NNMASK].any())
        if self.code_seen is not kernel.rhs_code:  # same program as the last run: known
            self.code_seen = kernel.rhs_code
            self.has_time = int(vm.reads_time(kernel.rhs_code))
        iw[S.I_HAS_TIME] = self.has_time
        return self

    def advance(self, kernel, budget):
        method = self.iw[S.I_METHOD]
        if self.sparse and method != DORMAND_PRINCE:  # SuperLU: see sparse.single_threaded_blas
            step = (bdf.advance if method == BDF else
                    sparse_radau.advance if method == RADAU_IIA else sparse.advance)
            with sparse.single_threaded_blas():
                step(kernel, self, self.pattern, budget)
            return
        driver.advance(kernel, self.p, self.regs, self.y, self.atol, self.pol, self.fs,
                       self.iw, self.V, self.cont, self.J, self.jv, self.LU, self.piv,
                       self.LUc, self.pivc, self.cbuf, self.t_out, self.y_out, self.gv,
                       self.ev_dir, self.ev_term, self.ev_t, self.ev_i, self.ev_y,
                       self.swlog, self.hist, budget)


_POOL: dict[tuple, list[_Run]] = {}
POOL_KEYS = 32          # distinct run shapes kept
POOL_PER_KEY = 4        # runs kept per shape (threads may integrate concurrently)
POOL_MAX_VALUES = 1 << 16  # larger runs (long output grids, big models) are not kept


def _pool_key(kernel, t_out, o):
    return (kernel.n, kernel.n_regs, len(kernel.jac_rows), kernel.n_events, o.method,
            o.max_events, o.diagnostics == "full", len(t_out))


def _take_run(kernel, p, y0, t0, t1, t_out, o) -> _Run:
    key = _pool_key(kernel, t_out, o)
    free = _POOL.get(key)
    try:
        run = free.pop() if free else None
    except IndexError:  # another thread took the last one
        run = None
    if run is None:
        run = _Run(kernel, t_out, o)
        run.key = key
    return run.reset(kernel, p, y0, t0, t1, t_out, o)


def _give_back(kernel, run, o):
    """Keep a finished dense-path run for the next call with the same shapes."""
    if run.sparse or run.buffers[0].size > POOL_MAX_VALUES:
        return
    key = run.key
    free = _POOL.get(key)
    if free is None:
        if len(_POOL) >= POOL_KEYS:
            _POOL.clear()
        free = _POOL.setdefault(key, [])
    if len(free) < POOL_PER_KEY:
        run.p = run.t_out = None  # hold no caller arrays
        free.append(run)


def _plain(a) -> bool:
    """A writeable C-contiguous float64 numpy array: the compiled loop takes it as it is
    (a read-only array is another type to numba and would compile the loop again)."""
    f = a.flags if type(a) is np.ndarray else None
    return f is not None and a.dtype == np.float64 and f.c_contiguous and f.writeable


def _writeable(a, dtype) -> np.ndarray:
    """``a`` as a writeable C-contiguous array of ``dtype``. A read-only array (a prepared
    model's event flags are frozen) is another type to numba: passing one would make each
    worker process load a second specialisation of the compiled loop on its first job
    (about 0.1 s), one that the warm-up never touched."""
    a = np.asarray(a, dtype=dtype)
    return a if a.flags.writeable and a.flags.c_contiguous else np.array(a, dtype=dtype)


def _carve(dtype, *shapes):
    """Zeroed C-contiguous arrays of the given shapes, all views of one buffer."""
    sizes = [math.prod(sh) for sh in shapes]
    buf = np.zeros(sum(sizes), dtype=dtype)
    out, k = [], 0
    for sh, size in zip(shapes, sizes):
        out.append(buf[k:k + size].reshape(sh))
        k += size
    return out


def _check(kernel, y0, t0, t1, t_out, o):
    if o.method not in METHODS:
        raise ValueError(f"unknown method '{o.method}'; choose one of {', '.join(METHODS)}")
    if o.machine_code not in native.MODES:
        raise ValueError(f"unknown machine_code '{o.machine_code}'; choose one of "
                         f"{', '.join(native.MODES)}")
    if not (np.isfinite(t0) and np.isfinite(t1) and t1 > t0):
        raise ValueError("t_span must be two finite times with t_end > t_start")
    if len(y0) != kernel.n:
        raise ValueError(f"y0 has {len(y0)} values, the model has {kernel.n} states")
    if t_out.ndim == 1 and len(t_out) <= 16:  # plain floats beat array reductions here
        ts = t_out.tolist()
        bad = not all(map(math.isfinite, ts)) or any(b < a for a, b in zip(ts, ts[1:]))
    else:
        bad = len(t_out) > 1 and not (t_out[1:] >= t_out[:-1]).all() or \
            not np.isfinite(t_out).all()
    if bad:
        raise ValueError("t_out must be finite and non-decreasing")
    atol_ok = o.atol >= 0 if isinstance(o.atol, float) else np.all(np.asarray(o.atol) >= 0)
    if not (o.rtol > 0 and atol_ok):
        raise ValueError("rtol must be positive and atol non-negative")


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
    """Integrate y' = f(t, y; p) over t_span; states at ``t_out`` (inside the span)."""
    started = time.perf_counter()
    o = options
    t0, t1 = float(t_span[0]), float(t_span[1])
    t_out = np.asarray(t_out, dtype=np.float64)
    _check(kernel, y0, t0, t1, t_out, o)
    if len(t_out) and not (t_out[0] >= t0 and t_out[-1] <= t1):  # sorted: ends suffice
        t_out = t_out[(t_out >= t0) & (t_out <= t1)]
    run = _take_run(kernel, p, y0, t0, t1, t_out, o)
    secs = [0.0] * len(METHOD_NAMES)
    stop = None
    if o.rtol < MIN_RTOL:
        stop = TOLERANCE_UNREACHABLE
    elif not driver.start(kernel, run.p, run.regs, run.y, run.atol, run.fs, run.iw,
                          run.V, run.gv, _ORDER[int(run.iw[S.I_METHOD])]):
        run.fs[S.F_T_BAD] = t0
        stop = NON_FINITE
    tier_up = None
    if stop is None:
        stop, kernel, tier_up = _loop(kernel, run, monitor, o, secs, started)
    sol = _solution(kernel, run, stop, o, conservation, secs, started)
    sol.machine_code_from = tier_up
    _give_back(kernel, run, o)
    return sol


TIER_UP_SECONDS = 1.0  # interpreted solve time before SolverOptions.machine_code="auto" compiles


def _tier_up(kernel, run, elapsed):
    """Move a long interpreted run to machine code (values stay bit-identical): the new
    kernel and what happened, or (kernel, None) when it cannot be built."""
    built = native.build(kernel, len(run.p))
    if not built.used:
        return kernel, None
    return built.kernel, {"t": float(run.fs[S.F_T]), "after_seconds": elapsed,
                          "seconds": built.seconds}


def _loop(kernel, run, monitor, o, secs, started):
    """Advance in chunks until the run ends; returns (stop, kernel, tier-up record)."""
    budget = 4 if run.sparse else 2000
    last_beat = started
    iw, fs = run.iw, run.fs
    t0, t1 = fs[S.F_T0], fs[S.F_TEND]
    may_tier_up = o.machine_code == "auto" and kernel.native_rhs == 0
    tiered = None
    while True:
        method = int(iw[S.I_METHOD])
        before = time.perf_counter()
        run.advance(kernel, budget)
        now = time.perf_counter()
        secs[method] += now - before
        if iw[S.I_STATUS] != S.RUNNING:
            return None, kernel, tiered
        chunk = now - before
        if chunk < 0.05:
            budget = min(budget * 2, 1 << 30)
        elif chunk > 0.2:
            budget = max(budget // 2, 1)
        # a long run moves once, after it has cost more than the compile will
        if may_tier_up and now - started >= max(TIER_UP_SECONDS, native.compile_estimate(kernel)):
            may_tier_up = False
            kernel, tiered = _tier_up(kernel, run, now - started)
            now = time.perf_counter()
        if now - started > o.max_wall_seconds:
            return TIME_LIMIT, kernel, tiered
        if monitor is not None and now - last_beat >= 0.5:
            last_beat = now
            if monitor((fs[S.F_T] - t0) / (t1 - t0)):
                return CANCELLED, kernel, tiered


def _message(outcome, run, o, kernel):
    t = float(run.fs[S.F_T])
    if outcome == SUCCEEDED:
        term = int(run.iw[S.I_TERMINAL])
        return f"stopped at terminal event {term - 1} at t={t:.6g}" if term else \
            "integrated to the end of the span"
    if outcome == TOLERANCE_UNREACHABLE:
        return (f"rtol={o.rtol:g} is below what double precision can deliver; "
                f"use rtol >= {MIN_RTOL:g}")
    if outcome == STEP_UNDERFLOW:
        return (f"the step size fell to the round-off limit at t={t:.6g}; the solution "
                "may blow up or the model may be discontinuous there: check the model "
                "near this time or loosen the tolerances")
    if outcome == NEWTON_FAILURE:
        return (f"the implicit method's Newton iterations kept failing at t={t:.6g}; "
                "the model may be discontinuous or singular there: check the "
                "expressions and initial values, or try another method")
    if outcome == STEP_LIMIT:
        return (f"the step limit ({o.max_steps}) was reached at t={t:.6g}: raise max_steps, "
                "loosen the tolerances, or use method 'auto' if the problem is stiff")
    if outcome == TIME_LIMIT:
        return (f"the wall-time limit ({o.max_wall_seconds:g} s) was reached at t={t:.6g}: "
                "raise max_wall_seconds or loosen the tolerances")
    if outcome == CANCELLED:
        return f"cancelled on request at t={t:.6g}"
    return (f"the model produced non-finite values (NaN or infinity) near "
            f"t={float(run.fs[S.F_T_BAD]):.6g}; the last good state is at t={t:.6g}: "
            "check for division by zero, logarithms or roots of negative values, "
            "or overflow")


def _solution(kernel, run, stop, o, conservation, secs, started):
    outcome = stop or _STATUS[int(run.iw[S.I_STATUS])]
    k = int(run.iw[S.I_IOUT])
    t_res = run.t_out[:k].copy()
    y_res = run.y_out[:k].copy()
    aux = np.empty((k, kernel.n_aux))
    if kernel.n_aux:
        aux_at_outputs(kernel, t_res, y_res, run.p, run.regs, aux)
    ne = min(int(run.iw[S.I_NEV_LOG]), len(run.ev_t))
    term = int(run.iw[S.I_TERMINAL])
    sol = Solution(
        t=t_res, y=y_res, aux=aux, outcome=outcome, message=_message(outcome, run, o, kernel),
        t_reached=float(run.fs[S.F_T]), y_reached=run.y.copy(),
        terminal_event=(term - 1) if term else None)
    if len(run.ev_t):  # a model with events (else the empty defaults)
        sol.event_t, sol.event_index = run.ev_t[:ne].copy(), run.ev_i[:ne].copy()
        sol.event_y = run.ev_y[:ne].copy()
    if o.diagnostics == "full":
        sol.report = build_report(kernel, run, o, sol, conservation, secs, started)
    else:  # "counts": counters and switch log only; the run's arrays go back to the pool
        snap = _Counters(run, sol.y if conservation is not None else None)
        seconds = time.perf_counter() - started
        # the closure holds the snapshot, not the Solution (no reference cycle: a sweep's
        # solutions are freed at once, not by the cyclic garbage collector)
        sol._report_later = lambda: build_report(kernel, snap, o, snap, conservation, secs,
                                                 started, seconds)
    return sol


class _Counters:
    """What a "counts" report reads from a run, copied before the run is reused. It also
    stands in for the Solution, whose states ``y`` the conservation drift needs (given
    only when a drift is asked for)."""

    def __init__(self, run, y_for_drift):
        self.iw, self.fs = run.iw.copy(), run.fs.copy()
        k = min(int(self.iw[S.I_NSWITCH]), len(run.swlog))
        self.swlog = run.swlog[:k].copy() if k else _NO_SWITCHES
        self.y = y_for_drift
        self.y0 = None if y_for_drift is None else run.y0.copy()
        self.sparse = run.sparse


_NO_SWITCHES = np.zeros((0, 7))
_NO_SWITCHES.flags.writeable = False
