"""Calibration specs shared by the service, e2e, client and CLI tests (all data invented)."""
import math

# dA/dt = -k A, A(0) = 2: A(t) = 2 exp(-k t). Data from k = 0.3 without noise, so the
# least-squares estimate is k = 0.3 exactly (the closed form reproduces every point).
K_TRUE = 0.3
TIMES = [0.0, 0.5, 1.0, 2.0, 3.0, 5.0, 8.0]
DECAY_MODEL = {"title": "first-order decay", "states": {"A": 2.0}, "parameters": {"k": 1.0},
               "ddt": {"A": "-k*A"}}


def decay_value(t: float, k: float = K_TRUE) -> float:
    return 2.0 * math.exp(-k * t)


def decay_spec(**extra) -> dict:
    spec = {"label": "invented decay", "model": DECAY_MODEL,
            "experiments": [{"name": "run1", "span": [0.0, 10.0],
                             "data": [{"t": t, "A": decay_value(t)} for t in TIMES]}],
            "observables": {"A": "A"}, "noise": {"A": {"absolute": 0.01}},
            "unknowns": [{"name": "k", "lower": 0.01, "upper": 10.0}], "starts": 4}
    spec.update(extra)
    return spec


def decay_csv(skip: int = 0) -> str:
    """The same data as CSV text; the first ``skip`` rows after t = 0 get an empty cell for A."""
    lines = ["# invented data", "t,A"]
    for i, t in enumerate(TIMES):
        lines.append(f"{t},{'' if 0 < i <= skip else repr(decay_value(t))}")
    return "\n".join(lines) + "\n"


# dy/dt = k y^2, y(0) = 1: y = 1 / (1 - k t) blows up at t = 1/k. Over the span [0, 1] every
# k >= 1 makes the solve fail; the data come from k = 0.5.
BLOWUP_MODEL = {"title": "blow-up", "states": {"y": 1.0}, "parameters": {"k": 0.5}, "ddt": {"y": "k*y^2"}}


def blowup_spec() -> dict:
    times = [0.0, 0.2, 0.4, 0.6, 0.8, 1.0]
    return {"model": BLOWUP_MODEL,
            "experiments": [{"name": "e", "span": [0.0, 1.0],
                             "data": [{"t": t, "y": 1.0 / (1.0 - 0.5 * t)} for t in times]}],
            "observables": {"y": "y"}, "noise": {"y": {"absolute": 0.01}},
            "unknowns": [{"name": "k", "lower": 0.1, "upper": 10.0, "start": 5.0}], "starts": 4}
