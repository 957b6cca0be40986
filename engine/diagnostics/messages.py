"""The messages a run ends with: what happened, where, and what the user can do."""
from __future__ import annotations

from dataclasses import dataclass

from engine.outcomes import (CANCELLED, MIN_RTOL, NEWTON_FAILURE, NON_FINITE, STEP_LIMIT,
                             STEP_UNDERFLOW, SUCCEEDED, TIME_LIMIT, TOLERANCE_UNREACHABLE)


def message(outcome: str, t: float, t_bad: float, terminal: int, rtol: float, max_steps: int,
            max_wall_seconds: float) -> str:
    """What happened and what to do, for a run that ended with ``outcome`` at ``t``.

    ``t_bad`` is where non-finite values appeared; ``terminal`` is 1 + the index of the
    terminal event that stopped the run (0: none)."""
    if outcome == SUCCEEDED:
        return f"stopped at terminal event {terminal - 1} at t={t:.6g}" if terminal else \
            "integrated to the end of the span"
    if outcome == TOLERANCE_UNREACHABLE:
        return (f"rtol={rtol:g} is below what double precision can deliver; "
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
        return (f"the step limit ({max_steps}) was reached at t={t:.6g}: raise max_steps, "
                "loosen the tolerances, or use method 'auto' if the problem is stiff")
    if outcome == TIME_LIMIT:
        return (f"the wall-time limit ({max_wall_seconds:g} s) was reached at t={t:.6g}: "
                "raise max_wall_seconds or loosen the tolerances")
    if outcome == CANCELLED:
        return f"cancelled on request at t={t:.6g}"
    return (f"the model produced non-finite values (NaN or infinity) near "
            f"t={t_bad:.6g}; the last good state is at t={t:.6g}: "
            "check for division by zero, logarithms or roots of negative values, "
            "or overflow")


# How much a state must have grown, relative to its start (or to 1 for a state that
# started at 0), to be named as growing without bound.
GROWTH_NAMED = 1e6
STIFF_RATIO = 1e3  # a stiffness ratio this large counts as stiff (common practice: >> 1)


@dataclass(frozen=True)
class Evidence:
    """What a finished run knows about why it ended, in plain values."""

    method: str                      # method in use at the end
    pinned: bool                     # the job chose the method (not auto)
    rho: float                       # last spectral-radius estimate (0: none)
    h_last: float                    # last accepted step
    boundary: float                  # the explicit method's real stability boundary
    stiffness_ratio: float | None    # largest sampled stiffness ratio (full diagnostics)
    ratio_at: float | None           # where it was sampled
    stiff_from: float | None         # first time the run looked stiff, when known
    grew: tuple = ()                 # (state name, |value|) of states that grew without bound


def explicit_limited(ev: Evidence) -> bool:
    """The explicit method's last step was held by stability (h rho near the boundary)."""
    return ev.method == "dormand_prince_54" and ev.rho > 0 and ev.h_last * ev.rho >= 0.5 * ev.boundary


def _stiffness_words(ev: Evidence) -> str:
    parts = []
    if ev.stiffness_ratio:
        parts.append(f"stiffness ratio ~{ev.stiffness_ratio:.0e} at t = {ev.ratio_at:.4g}")
    if ev.stiff_from is not None and (ev.ratio_at is None or ev.stiff_from < ev.ratio_at):
        parts.append(f"stiff from t = {ev.stiff_from:.4g}")
    return f" ({', '.join(parts)})" if parts else ""


def diagnosis(outcome: str, ev: Evidence) -> str:
    """A sentence to add to the message: why the run ended, in the user's words ("" if none)."""
    stiff = explicit_limited(ev) or (ev.stiffness_ratio or 0.0) >= STIFF_RATIO
    if outcome in (STEP_LIMIT, TIME_LIMIT) and ev.pinned and ev.method == "dormand_prince_54" and stiff:
        return (f"the model is stiff{_stiffness_words(ev)}: the explicit method you pinned "
                f"(dormand_prince_54) takes steps limited by stability, not accuracy (steps of about "
                f"{ev.boundary / ev.rho if ev.rho else 0:.3g} at the end); use method 'auto'")
    if outcome == TIME_LIMIT:
        how = f"stiff{_stiffness_words(ev)}" if stiff else "did not look stiff"
        return f"the run was on {ev.method} when the limit came, and the model {how}"
    if outcome in (NON_FINITE, STEP_UNDERFLOW) and ev.grew:
        named = ", ".join(f"{name} (|value| {size:.3g})" for name, size in ev.grew)
        verb = "grows" if len(ev.grew) == 1 else "grow"
        return f"{named} {verb} without bound there: the model may blow up (check signs and rate laws)"
    return ""


def grown_states(names, y0, y, limit: int = 3) -> tuple:
    """The states (at most ``limit``) that grew by GROWTH_NAMED or more, largest first."""
    out = []
    for i, name in enumerate(names):
        v, start = abs(float(y[i])), abs(float(y0[i]))
        if v != v or v == float("inf") or v >= GROWTH_NAMED * max(start, 1.0):
            out.append((name, v if v == v else float("inf")))
    out.sort(key=lambda item: -item[1])
    return tuple(out[:limit])
