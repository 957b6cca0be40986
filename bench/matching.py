"""Accuracy in digits and comparison of solvers at matched accuracy.

digits = -log10( max_i |y_i - ref_i| / (|ref_i| + floor) ), a fixed accuracy
scale per problem (the floor does not follow the run's tolerances), so runs at
different rtol are measured with one ruler. Work-precision data (digits, time)
of one solver are interpolated linearly in (digits, log10 seconds).
"""
from __future__ import annotations

import math

import numpy as np

MAX_DIGITS = 16.0


def digits(y, ref, floor) -> float | None:
    """Achieved digits at the end point, or None when y is missing or not finite."""
    y, ref = np.asarray(y, dtype=float), np.asarray(ref, dtype=float)
    if y.shape != ref.shape or not np.all(np.isfinite(y)):
        return None
    err = float(np.max(np.abs(y - ref) / (np.abs(ref) + floor)))
    return MAX_DIGITS if err == 0.0 else float(min(MAX_DIGITS, -math.log10(err)))


def curve(records: list[dict]) -> list[tuple[float, float]]:
    """(digits, log10 seconds) of successful runs, sorted by digits, one point per digit value."""
    pts = sorted((r["digits"], math.log10(r["seconds"])) for r in records
                 if r.get("status") == "ok" and r.get("digits") is not None
                 and r.get("seconds") and r["seconds"] > 0)
    out: list[tuple[float, float]] = []
    for d, lt in pts:
        if out and abs(out[-1][0] - d) < 1e-9:
            out[-1] = (d, min(out[-1][1], lt))
        else:
            out.append((d, lt))
    return out


def seconds_at(records: list[dict], target: float, slack: float = 0.25) -> float | None:
    """Seconds a solver needs for ``target`` digits, interpolated on its work-precision curve.

    Where the curve is not monotone (tighter tolerance gave fewer digits), the cheapest
    run reaching at least ``target`` digits bounds the cost from above. Outside the
    measured range by more than ``slack`` digits: None (no extrapolation).
    """
    pts = curve(records)
    if not pts:
        return None
    ds = [d for d, _ in pts]
    if target < ds[0] - slack or target > ds[-1] + slack:
        return None
    if target <= ds[0]:
        return 10 ** pts[0][1]
    if target >= ds[-1]:
        return 10 ** pts[-1][1]
    for (d0, t0), (d1, t1) in zip(pts, pts[1:]):
        if d0 <= target <= d1:
            w = (target - d0) / (d1 - d0) if d1 > d0 else 0.0
            interp = t0 + w * (t1 - t0)
            best = min(t for d, t in pts if d >= target)
            return 10 ** min(interp, best)
    return None


def speedup(base: list[dict], peer: list[dict], target: float) -> float | None:
    """How many times faster ``base`` is than ``peer`` at ``target`` digits (None if unknown)."""
    a, b = seconds_at(base, target), seconds_at(peer, target)
    if a is None or b is None or a <= 0:
        return None
    return b / a
