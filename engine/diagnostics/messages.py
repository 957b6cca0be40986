"""The messages a run ends with: what happened, where, and what the user can do."""
from __future__ import annotations

from engine.outcomes import (CANCELLED, MIN_RTOL, NEWTON_FAILURE, STEP_LIMIT, STEP_UNDERFLOW,
                             SUCCEEDED, TIME_LIMIT, TOLERANCE_UNREACHABLE)


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
