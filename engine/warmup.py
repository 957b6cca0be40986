"""Load every compiled kernel once (from numba's disk cache, or compile it).

Run once per host before worker processes start (``stifflane warm``), so that
several processes never compile into the same cache at the same time.
"""
from __future__ import annotations

import numpy as np

# A two-state decay chain exercising every method; invented, for warm-up only.
_WARM_MODEL = {
    "title": "warm-up chain (invented)",
    "states": {"a": 1.0, "b": 0.0},
    "parameters": {"k": 2.0},
    "derived": {"total": "a + b"},
    "ddt": {"a": "-k*a", "b": "k*a - 0.5*b"},
}


def warm_up() -> None:
    from engine.integrate import METHODS, SolverOptions, integrate
    from engine.model import prepare

    model = prepare(_WARM_MODEL)
    times = np.linspace(0.0, 1.0, 5)
    for method in METHODS:
        integrate(model.kernel, model.p, model.y0, (0.0, 1.0), times, SolverOptions(method=method),
                  conservation=model.conservation)
