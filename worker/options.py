"""Solver options for a loaded job spec and its prepared model (jobs and batch members alike)."""
from __future__ import annotations

import numpy as np

from engine.integrate import SolverOptions
from engine.model import PreparedModel
from schemas.job import atol_vector


def solver_options(job: dict, model: PreparedModel, wall_cap: float | None = None,
                   diagnostics: str = "full") -> SolverOptions:
    """Options from a loaded job spec v1: tolerances, limits, non-negativity, the model's events.

    ``wall_cap`` bounds the job's own wall-time limit (kept below the queue's soft limit, so
    the integrator ends a long run itself, with its diagnostics).
    """
    tol, limits = job["tolerance"], job["limits"]
    wall = limits["max_wall_seconds"] if wall_cap is None else min(limits["max_wall_seconds"], wall_cap)
    return SolverOptions(
        method=job["method"], rtol=tol["rtol"], atol=atol_vector(tol["atol"], model.state_names),
        max_steps=limits["max_steps"], max_wall_seconds=wall,
        # the job's switch covers every state; the model may mark single states too
        nonnegative=np.asarray(model.nonnegative, dtype=bool) | bool(job["nonnegative"]),
        event_directions=model.event_directions, event_terminal=model.event_terminal,
        diagnostics=diagnostics, machine_code=job["machine_code"], state_names=tuple(model.state_names))
