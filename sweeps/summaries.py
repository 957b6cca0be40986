"""Per-member summary quantities of a batch, from states on a fine output grid.

The integrator reports states (and derived quantities) at the times of a
*summary grid*: ``count`` points spaced linearly or logarithmically over the
span, merged with every time a summary asks for. Those values come from the
method's own dense output, so each is accurate to the solver tolerance; what the
grid adds is the error of reading a continuous quantity from samples:

- ``final`` / ``at``: exact grid points (the times are put on the grid).
- ``max`` / ``min`` and their times: the extreme sample refined by the vertex of
  the parabola through it and its two neighbours; for a smooth extremum inside
  the span the value is good to O(h^3) and its time to O(h^2) (h = local grid
  spacing).
- ``crossing``: first time the quantity is at or above (``"above"``) or at or
  below (``"below"``) a level, by linear interpolation between the bracketing
  samples; error about h^2 |x''| / (8 |x'|). For times that must be exact to
  round-off, declare an event in the model and use ``event``.
- ``event``: first time the model's event fires, located by the integrator on
  its interpolant (engine/integrators/events.py), independent of the grid.
- ``integral``: composite trapezoid rule on the grid; error about
  (t1 - t0) h^2 max|x''| / 12.

A summary that does not exist for a member (no crossing, no event) is NaN,
reported as null. Pure numpy; one plan per batch, one call per member.
"""
from __future__ import annotations

from typing import NamedTuple

import numpy as np

KINDS = ("final", "at", "max", "min", "crossing", "event", "integral")
WHEN = ("above", "below")


class Term(NamedTuple):
    kind: str
    source: int      # 0: states, 1: derived quantities
    index: int       # column in y or aux, or event index
    time: float      # "at"
    level: float     # "crossing"
    above: bool      # "crossing"


def default_name(spec: dict) -> str:
    """Column name when the user gives none, e.g. ``max_T``, ``at_y1_10``, ``event_ignition``."""
    kind = spec["kind"]
    if kind == "event":
        return f"event_{spec['event']}"
    if kind == "at":
        return f"at_{spec['of']}_{spec['time']:g}"
    if kind == "crossing":
        return f"{spec['when']}_{spec['of']}_{spec['level']:g}"
    return f"{kind}_{spec['of']}"


def columns(specs: list[dict]) -> list[str]:
    """Table columns: one per summary; max and min add ``<name>_time``."""
    out = []
    for s in specs:
        name = s.get("name") or default_name(s)
        out.append(name)
        if s["kind"] in ("max", "min"):
            out.append(name + "_time")
    return out


def plan(specs: list[dict], state_names, aux_names, event_names) -> list[Term]:
    """Resolve names to indexes once per batch (names were validated on submit)."""
    states = {n: i for i, n in enumerate(state_names)}
    aux = {n: i for i, n in enumerate(aux_names)}
    events = {n: i for i, n in enumerate(event_names)}
    terms = []
    for s in specs:
        kind = s["kind"]
        if kind == "event":
            source, index = 0, events[s["event"]]
        elif s["of"] in states:
            source, index = 0, states[s["of"]]
        else:
            source, index = 1, aux[s["of"]]
        terms.append(Term(kind, source, index, float(s.get("time", np.nan)),
                          float(s.get("level", np.nan)), s.get("when", "above") == "above"))
    return terms


def grid(span, count: int, spacing: str, extra_times=()) -> np.ndarray:
    """The summary grid: ``count`` points over ``span`` plus ``extra_times``, sorted, unique.

    Log spacing starts at ``span[0]`` and then spaces geometrically from 1e-6 of the
    span's length, for solutions that change fast early.
    """
    t0, t1 = float(span[0]), float(span[1])
    if spacing == "log":
        base = np.concatenate([[t0], t0 + np.geomspace((t1 - t0) * 1e-6, t1 - t0, count - 1)])
        base[-1] = t1
    else:
        base = np.linspace(t0, t1, count)
    extra = np.asarray(list(extra_times), dtype=np.float64)
    return np.unique(np.concatenate([base, extra[(extra >= t0) & (extra <= t1)]]))


def evaluate(terms: list[Term], t: np.ndarray, y: np.ndarray, aux: np.ndarray,
             event_t: np.ndarray, event_index: np.ndarray) -> np.ndarray:
    """Summary values of one member, in the order of :func:`columns`."""
    out = []
    for term in terms:
        if term.kind == "event":
            hits = event_t[event_index == term.index]
            out.append(float(hits[0]) if len(hits) else np.nan)
            continue
        x = (y if term.source == 0 else aux)[:, term.index]
        if term.kind == "final":
            out.append(float(x[-1]) if len(x) else np.nan)
        elif term.kind == "at":
            out.append(value_at(t, x, term.time))
        elif term.kind in ("max", "min"):
            out.extend(extremum(t, x, term.kind == "max"))
        elif term.kind == "crossing":
            out.append(first_crossing(t, x, term.level, term.above))
        elif term.kind == "integral":
            out.append(float(np.trapezoid(x, t)) if len(x) > 1 else np.nan)
    return np.asarray(out, dtype=np.float64)


def value_at(t: np.ndarray, x: np.ndarray, time: float) -> float:
    """x at ``time`` (a grid point; linear interpolation otherwise); NaN outside."""
    if not len(t) or time < t[0] or time > t[-1]:
        return np.nan
    return float(np.interp(time, t, x))


def extremum(t: np.ndarray, x: np.ndarray, largest: bool) -> tuple[float, float]:
    """(value, time) of the maximum (or minimum), refined by a parabola through three samples."""
    if not len(x):
        return np.nan, np.nan
    s = x if largest else -x
    i = int(np.argmax(s))
    if np.isnan(s[i]):  # argmax stops at the first NaN
        if np.all(np.isnan(s)):
            return np.nan, np.nan
        i = int(np.nanargmax(s))
    best, when = float(s[i]), float(t[i])
    if 0 < i < len(x) - 1:
        x0, x1, x2 = t[i - 1], t[i], t[i + 1]
        y0, y1, y2 = s[i - 1], s[i], s[i + 1]
        d1, d2 = (y1 - y0) / (x1 - x0), (y2 - y1) / (x2 - x1)
        a = (d2 - d1) / (x2 - x0)
        if a < 0:  # concave: the vertex is a maximum of the parabola
            tv = 0.5 * (x0 + x1) - d1 / (2 * a)
            if x0 <= tv <= x2:
                pv = y0 + d1 * (tv - x0) + a * (tv - x0) * (tv - x1)
                if pv >= best:
                    best, when = float(pv), float(tv)
    return (best if largest else -best), when


def first_crossing(t: np.ndarray, x: np.ndarray, level: float, above: bool) -> float:
    """First time x >= level (``above``) or x <= level; t[0] if it holds at the start."""
    if not len(x):
        return np.nan
    s = (x - level) if above else (level - x)
    hit = np.nonzero(s >= 0)[0]
    if not len(hit):
        return np.nan
    i = int(hit[0])
    if i == 0:
        return float(t[0])
    sa, sb = s[i - 1], s[i]  # sa < 0 <= sb
    return float(t[i - 1] + (t[i] - t[i - 1]) * (-sa) / (sb - sa))
