"""The JSON-safe run report (one vocabulary for API, dashboard and benchmarks;
key names are documented in docs/engine.md). No NaN or infinity: None instead."""
from __future__ import annotations

import math
import time

import numpy as np
from numba import njit

from engine.integrators import state as S
from engine.diagnostics import stiffness
from engine.kernels import vm
from engine.integrators.switching import P_BOUNDARY, REASON_NAMES
from engine.integrators.tableaux import METHOD_NAMES

MAX_HISTORY = 500


@njit(cache=True, nogil=True)
def aux_at_outputs(kernel, t, y, p, regs, out):
    for i in range(t.shape[0]):
        vm.aux(kernel, t[i], y[i], p, regs, out[i])


def _num(x):
    x = float(x)
    return x if math.isfinite(x) else None


def _switches(run):
    rows = run.swlog[:min(int(run.iw[S.I_NSWITCH]), len(run.swlog))].tolist()
    out = []
    for r in rows:
        entry = {"t": _num(r[0]), "from": METHOD_NAMES[int(r[1])],
                 "to": METHOD_NAMES[int(r[2])], "h": _num(r[3]), "rho": _num(r[4]),
                 "explicit_step": _num(r[5]), "reason": REASON_NAMES[int(r[6])]}
        entry["explanation"] = explain_switch(entry)
        out.append(entry)
    return out


def explain_switch(s: dict) -> str:
    """One sentence on why the run changed method, from the switch log's numbers."""
    t, h, rho, hexp = s["t"], s["h"], s["rho"], s["explicit_step"]
    if None in (t, h, rho, hexp):
        return f"switched from {s['from']} to {s['to']} ({s['reason']})"
    if s["reason"] == "stiffness_detected":
        return (f"at t = {t:.4g} the explicit step ({h:.3g}) had reached its stability limit "
                f"{hexp:.3g} (the fastest decay rate is {rho:.3g}, so steps beyond about "
                f"{hexp:.3g} would be unstable) while the error estimate allowed longer steps: "
                f"stability, not accuracy, was setting the step, so the run went on with {s['to']}")
    if s["reason"] == "explicit_step_unstable":
        return (f"at t = {t:.4g} the explicit method's steps kept failing at the stability limit "
                f"{hexp:.3g} (fastest decay rate {rho:.3g}): the run went on with {s['to']}")
    return (f"at t = {t:.4g} the implicit step ({h:.3g}) had fallen to about the explicit "
            f"method's stable step {hexp:.3g}: the cheaper explicit method {s['to']} took over")


_METHOD_ARRAY = np.array(METHOD_NAMES, dtype=object)


def _history(run):
    h = run.hist[:int(run.iw[S.I_HIST_N])]
    if len(h) > MAX_HISTORY:
        h = h[np.linspace(0, len(h) - 1, MAX_HISTORY).round().astype(int)]
    # whole-column conversions: this runs once per job, over up to MAX_HISTORY rows
    explicit = h[:, 3].astype(object)
    explicit[~(h[:, 3] > 0)] = None
    return {"t": h[:, 0].tolist(), "h": h[:, 1].tolist(),
            "method": _METHOD_ARRAY[h[:, 2].astype(np.int64)].tolist(),
            "explicit_step": explicit.tolist()}


def _drift(conservation, y0, y):
    C = np.atleast_2d(np.asarray(conservation, dtype=float))
    if C.size == 0 or len(y) == 0:
        return None
    c0 = C @ y0
    scale = np.maximum(np.abs(c0), np.abs(C) @ np.abs(y0))
    scale[scale == 0] = 1.0
    return _num(np.max(np.abs(y @ C.T - c0) / scale))


def _warnings(run, o, y0):
    out = []
    scale = np.max(np.abs(run.y_out[:int(run.iw[S.I_IOUT])]), axis=0, initial=0.0)
    scale = np.maximum(scale, np.abs(y0))
    big = np.nonzero((run.atol > 0) & (run.atol >= scale) & (scale > 0))[0]
    if len(big):
        out.append(f"atol is not smaller than the largest value of state(s) "
                   f"{', '.join(map(str, big[:10].tolist()))}: their results carry no "
                   "correct digits; lower atol for them")
    if int(run.iw[S.I_NONNEG_REJECTS]):
        out.append(f"{int(run.iw[S.I_NONNEG_REJECTS])} steps were rejected for going "
                   "significantly negative on non-negative states")
    if int(run.iw[S.I_NEV_TOTAL]) > len(run.ev_t):
        out.append(f"{int(run.iw[S.I_NEV_TOTAL])} events occurred; only the first "
                   f"{len(run.ev_t)} were recorded")
    if int(run.iw[S.I_NSWITCH]) > len(run.swlog):
        out.append("more method switches than the log keeps; the first ones are listed")
    return out


def build_report(kernel, run, o, sol, conservation, secs, started, seconds=None) -> dict:
    """The report of a finished run (``run``: the run's arrays, or a snapshot of its
    counters for "counts"); ``seconds``: the solve time, if measured already."""
    iw, fs = run.iw.tolist(), run.fs.tolist()  # plain numbers: cheaper to read one by one
    steps = {name: iw[S.I_STEPS_DORMAND_PRINCE + k] for k, name in enumerate(METHOD_NAMES)}
    rep = {
        "method": o.method,
        "methods_used": [m for m in METHOD_NAMES if steps[m]],
        "accepted_steps": int(iw[S.I_ACCEPTED]),
        "rejected_steps": int(iw[S.I_REJECTED]),
        "rhs_evaluations": int(iw[S.I_NFEV]),
        "jacobian_evaluations": int(iw[S.I_NJEV]),
        "lu_factorizations": int(iw[S.I_NLU]),
        "newton_iterations": int(iw[S.I_NEWTON_IT]),
        "newton_failures": int(iw[S.I_NEWTON_FAIL]),
        "steps_per_method": steps,
        "seconds_per_method": ({name: float(secs[k]) for k, name in enumerate(METHOD_NAMES)}
                               if iw[S.I_SWITCH_RETURNS] else None),  # "counts": not timed
        "switch_count": int(iw[S.I_NSWITCH]),
        "switches": _switches(run),
        "events_found": int(iw[S.I_NEV_TOTAL]),
        "explicit_steps_needed": _num(fs[S.F_EXPL_NEEDED]),
        "t_reached": _num(fs[S.F_T]),
        "conservation_drift": (None if conservation is None
                               else _drift(conservation, run.y0, sol.y)),
        "warnings": [],
        "sparse_linear_algebra": bool(run.sparse),
    }
    if o.diagnostics == "full":
        rep["step_history"] = _history(run)
        rep["stiffness_samples"] = stiffness.sample(kernel, run.p, sol.t, sol.y,
                                                    float(run.pol[P_BOUNDARY]))
        rep["warnings"] = _warnings(run, o, run.y0)
    rep["solve_seconds"] = time.perf_counter() - started if seconds is None else seconds
    return rep
