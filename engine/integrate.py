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

from engine.integrators import driver, state as S
from engine.integrators.workspace import give_back, take_run
from engine.kernels import native, vm
from engine.diagnostics.messages import STIFF_RATIO, Evidence, diagnosis, grown_states, message
from engine.diagnostics import stiffness
from engine.diagnostics.report import _history, aux_at_outputs, build_report
from engine.integrators.switching import P_BOUNDARY, SwitchPolicy
from engine.integrators.tableaux import BDF, DORMAND_PRINCE, METHOD_NAMES, RADAU_IIA, ROSENBROCK

from engine.choices import METHODS  # noqa: E402  (numba-free, read by the API)

from engine.outcomes import (CANCELLED, MIN_RTOL, NEWTON_FAILURE, NON_FINITE,  # noqa: E402,F401
                             OUTCOMES, STEP_LIMIT, STEP_UNDERFLOW, SUCCEEDED, TIME_LIMIT,
                             TOLERANCE_UNREACHABLE)

_ORDER = {DORMAND_PRINCE: 5, RADAU_IIA: 3, ROSENBROCK: 4, BDF: 1}
_STATUS = {S.DONE: SUCCEEDED, S.ST_STEP_UNDERFLOW: STEP_UNDERFLOW,
           S.ST_NEWTON_FAILURE: NEWTON_FAILURE, S.ST_STEP_LIMIT: STEP_LIMIT,
           S.ST_NON_FINITE: NON_FINITE}


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
    state_names: tuple = ()  # for messages that name states (default "y[i]")


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


class Reached:
    """What a running integration has reached so far, handed to ``integrate(live=...)``.

    Valid only during that call (the run's arrays change as soon as it returns); every
    method copies, and nothing is read unless asked, so an unused view costs nothing."""

    __slots__ = ("_kernel", "_run")

    def __init__(self, kernel, run):
        self._kernel, self._run = kernel, run

    @property
    def t(self) -> float:
        return float(self._run.fs[S.F_T])

    @property
    def method(self) -> str:
        return METHOD_NAMES[int(self._run.iw[S.I_METHOD])]

    @property
    def accepted_steps(self) -> int:
        return int(self._run.iw[S.I_ACCEPTED])

    def outputs(self, max_rows: int = 2000) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(t, y, derived) at the output times reached, thinned evenly to at most
        ``max_rows`` rows (the first and the last kept)."""
        run, kernel = self._run, self._kernel
        k = int(run.iw[S.I_IOUT])
        rows = np.unique(np.linspace(0, k - 1, max(int(max_rows), 2)).round().astype(np.int64)) \
            if k > max_rows else slice(0, k)
        t, y = run.t_out[rows].copy(), run.y_out[rows].copy()
        aux = np.empty((len(t), kernel.n_aux))
        if kernel.n_aux and len(t):
            aux_at_outputs(kernel, t, y, run.p, run.regs.copy(), aux)
        return t, y, aux

    def events(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(t, event index, states) of the events recorded so far."""
        run = self._run
        ne = min(int(run.iw[S.I_NEV_LOG]), len(run.ev_t))
        return run.ev_t[:ne].copy(), run.ev_i[:ne].copy(), run.ev_y[:ne].copy()

    def step_history(self) -> Optional[dict]:
        """The step history so far, in the report's shape (None without full diagnostics)."""
        return _history(self._run) if len(self._run.hist) else None


def _check(kernel, y0, t0, t1, t_out, o):
    if o.method not in METHODS:
        raise ValueError(f"unknown method '{o.method}'; choose one of {', '.join(METHODS)}")
    if o.machine_code not in native.MODES:
        raise ValueError(f"unknown machine_code '{o.machine_code}'; choose one of "
                         f"{', '.join(native.MODES)}")
    if not (np.isfinite(t0) and np.isfinite(t1) and t1 > t0 and np.isfinite(t1 - t0)):
        raise ValueError("t_span must be two finite times with t_end > t_start and a finite length")
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
    live: Optional[Callable[[Reached], None]] = None,
) -> Solution:
    """Integrate y' = f(t, y; p) over t_span; states at ``t_out`` (inside the span).

    ``live(reached)``, if given, is called before each monitor call (at most every 0.5 s)
    with a :class:`Reached` view of the outputs reached so far (for partial results)."""
    started = time.perf_counter()
    o = options
    t0, t1 = float(t_span[0]), float(t_span[1])
    t_out = np.asarray(t_out, dtype=np.float64)
    _check(kernel, y0, t0, t1, t_out, o)
    if len(t_out) and not (t_out[0] >= t0 and t_out[-1] <= t1):  # sorted: ends suffice
        t_out = t_out[(t_out >= t0) & (t_out <= t1)]
    run = take_run(kernel, p, y0, t0, t1, t_out, o)
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
        stop, kernel, tier_up = _loop(kernel, run, monitor, o, secs, started, live)
    sol = _solution(kernel, run, stop, o, conservation, secs, started)
    sol.machine_code_from = tier_up
    give_back(kernel, run, o)
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


def _loop(kernel, run, monitor, o, secs, started, live=None):
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
        if (monitor is not None or live is not None) and now - last_beat >= 0.5:
            last_beat = now
            if live is not None:
                live(Reached(kernel, run))
            if monitor is not None and monitor((fs[S.F_T] - t0) / (t1 - t0)):
                return CANCELLED, kernel, tiered


def _message(outcome, run, o, kernel):
    return message(outcome, float(run.fs[S.F_T]), float(run.fs[S.F_T_BAD]),
                   int(run.iw[S.I_TERMINAL]), o.rtol, o.max_steps, o.max_wall_seconds)


def _evidence(kernel, run, o, report) -> Evidence:
    """Why the run ended, from its arrays (and, with full diagnostics, the stiffness samples
    of the report plus one at the last state reached)."""
    fs, iw = run.fs, run.iw
    ratio = ratio_t = stiff_from = None
    samples = list((report or {}).get("stiffness_samples") or ())
    if report is not None:
        samples += stiffness.sample(kernel, run.p, np.array([fs[S.F_T]]), run.y[None, :].copy(),
                                    float(run.pol[P_BOUNDARY]))
    for sample in samples:
        r = sample.get("stiffness_ratio")
        if r is not None and (ratio is None or r > ratio):
            ratio, ratio_t = r, sample["t"]
        if r is not None and r >= STIFF_RATIO and stiff_from is None:
            stiff_from = sample["t"]
    if ratio is not None and ratio < STIFF_RATIO:
        ratio = ratio_t = None  # not worth quoting
    k = min(int(iw[S.I_NSWITCH]), len(run.swlog))
    if stiff_from is None and k:  # auto's first switch to an implicit method
        to_implicit = [row[0] for row in run.swlog[:k] if int(row[2]) != DORMAND_PRINCE]
        stiff_from = float(to_implicit[0]) if to_implicit else None
    names = o.state_names or tuple(f"y[{i}]" for i in range(len(run.y)))
    last = np.where(np.isfinite(run.V[S.V_YNEW]), np.maximum(np.abs(run.V[S.V_YNEW]), np.abs(run.y)),
                    np.inf)
    return Evidence(method=METHOD_NAMES[int(iw[S.I_METHOD])], pinned=o.method != "auto",
                    rho=float(fs[S.F_RHO]), h_last=float(fs[S.F_H_LAST]),
                    boundary=float(run.pol[P_BOUNDARY]), stiffness_ratio=ratio, ratio_at=ratio_t,
                    stiff_from=stiff_from,
                    grew=grown_states(names, run.y0, last))


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
    if outcome in (STEP_LIMIT, TIME_LIMIT, NON_FINITE, STEP_UNDERFLOW):
        why = diagnosis(outcome, _evidence(kernel, run, o, sol.report if o.diagnostics == "full" else None))
        if why:
            sol.message += "; " + why
    if o.diagnostics != "full":  # "counts": counters and switch log only; the run's arrays go back to the pool
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
