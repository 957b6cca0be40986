"""Which steps matter: parameters (and the reactions whose rate constant they are) ranked by
the normalised sensitivity of outputs the user names.

An output is a number read from one state's trajectory:

    at        y_i(t) at a time t of the span
    final     y_i at the last output time
    max       the largest y_i over the span; by the envelope theorem its sensitivity is
              s_i(t_max), the state's sensitivity at the time of the maximum (y_i' = 0 there)
    integral  the trapezoid of y_i over the output times (and of s_i, for its sensitivity)
    crossing  the delay t* - t0 until y_i first passes a value v (an ignition delay, a time to
              half conversion); implicit differentiation of y_i(t*(θ), θ) = v gives
              dt*/dθ = -s_i(t*) / y_i'(t*)

and its sensitivity to each θ is reported raw (d out / d θ) and normalised
(d ln out / d ln θ = raw · θ / out), signed. Entries are sorted by |normalised|.

Between output times (at, max, crossing) the state and its sensitivities are cubic Hermite
interpolants whose end slopes come from the model itself: y' = f(t, y, p) and
s' = J s + ∂f/∂θ, from the model's expression tree and its exact symbolic derivatives
(engine.language, evaluated in Python at a handful of points), so the interpolation error is
O(h^4) in the output spacing h; y_i'(t*) of a crossing is the right-hand side at the
interpolated state. A crossing between two output times that the outputs do not show (out and
back between them) is not seen: ask for denser outputs.

A parameter that is the rate constant of reactions (their ``k``, ``k_reverse`` or Arrhenius
``A`` is the parameter's name) is ranked with those reactions named beside it: its normalised
sensitivity is then that of the reactions' rates.

Pure functions on arrays; imports numpy and the model language only.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from engine.language.check import read_checked
from engine.language.derivative import jacobian
from engine.language.expr import evaluate
from engine.language.limits import DEFAULT_LIMITS, Limits

INITIAL_PREFIX = "init:"  # engine.sensitivities labels an initial value so
SUMMARIES = ("at", "final", "max", "integral", "crossing")
DIRECTIONS = ("both", "rising", "falling")
MAX_OUTPUTS = 20  # outputs one job may rank


@dataclass(frozen=True)
class Output:
    """One ranked output: ``state``'s ``summary``; ``t`` for "at", ``value`` (and the
    ``direction`` of the passage) for "crossing"."""
    state: str
    summary: str
    t: float | None = None
    value: float | None = None
    direction: str = "both"

    @classmethod
    def from_json(cls, d: dict) -> "Output":
        return cls(d["state"], d["summary"], d.get("t"), d.get("value"), d.get("direction") or "both")

    def to_json(self) -> dict:
        out = {"state": self.state, "summary": self.summary}
        if self.summary == "at":
            out["t"] = self.t
        if self.summary == "crossing":
            out["value"], out["direction"] = self.value, self.direction
        return out

    def label(self) -> str:
        """A short name: "final B", "max B", "B at t=2", "crossing B=0.5"."""
        if self.summary == "at":
            return f"{self.state} at t={self.t:.6g}"
        if self.summary == "crossing":
            way = "" if self.direction == "both" else f" {self.direction}"
            return f"crossing {self.state}={self.value:.6g}{way}"
        return f"{self.summary} {self.state}"


def rate_constant_reactions(model: dict) -> dict[str, list[str]]:
    """parameter name -> the reactions that use it as their rate constant: ``k``,
    ``k_reverse`` (named "<reaction> (reverse)") or the Arrhenius factor ``A`` written as the
    parameter's bare name. Reactions are named as the model language names them (``name``, or
    R1, R2, ... by position)."""
    params = model.get("parameters") or {}
    out: dict[str, list[str]] = {}
    for j, item in enumerate(model.get("reactions") or []):
        if not isinstance(item, dict):
            continue
        name = item.get("name") or f"R{j + 1}"
        arrhenius = item.get("arrhenius") if isinstance(item.get("arrhenius"), dict) else {}
        for given, label in ((item.get("k"), name), (arrhenius.get("A"), name),
                             (item.get("k_reverse"), f"{name} (reverse)")):
            if isinstance(given, str) and given.strip() in params:
                out.setdefault(given.strip(), []).append(label)
    return out


class _Slopes:
    """y_k' for the states state i reads and s_i' = J_i. s + ∂f_i/∂θ, from the model's tree."""

    def __init__(self, spec, i: int, wrt):
        b = spec.builder
        b.strict = False  # derivatives of valid models may fold to large constants
        root = spec.rhs[i]
        jy = [(k, node) for _, k, node in jacobian(b, [root], "y")]
        jp = {k: node for _, k, node in jacobian(b, [root], "p")}
        pindex = {name: j for j, name in enumerate(spec.param_names)}
        self.i = i
        self.deps = sorted({i} | {k for k, _ in jy})
        self.cols = [k for k, _ in jy]
        dfdtheta = [b.zero if label.startswith(INITIAL_PREFIX) else jp.get(pindex[label], b.zero)
                    for label in wrt]
        self.roots = [spec.rhs[k] for k in self.deps] + [node for _, node in jy] + dfdtheta
        self.rhs_i = root

    def at(self, t: float, y: np.ndarray, s: np.ndarray, p: np.ndarray) -> tuple[dict, np.ndarray]:
        """({state k: y_k'}, s_i' (m,)) at (t, y), sensitivities ``s`` (n, m)."""
        v = evaluate(self.roots, t, y, p)
        nd, nj = len(self.deps), len(self.cols)
        f = dict(zip(self.deps, v[:nd]))
        jrow = np.array(v[nd:nd + nj], dtype=float)
        dfdtheta = np.array(v[nd + nj:], dtype=float)
        sdot = (jrow @ s[self.cols] if nj else np.zeros(s.shape[1])) + dfdtheta
        return f, sdot

    def rhs(self, t: float, y: np.ndarray, p: np.ndarray) -> float:
        return float(evaluate([self.rhs_i], t, y, p)[0])


def _hermite(u: float, h: float, ya, fa, yb, fb):
    """Cubic Hermite value at u in [0, 1] of an interval of length h (arrays broadcast)."""
    h00, h10 = 2 * u ** 3 - 3 * u ** 2 + 1, u ** 3 - 2 * u ** 2 + u
    h01, h11 = -2 * u ** 3 + 3 * u ** 2, u ** 3 - u ** 2
    return h00 * ya + h10 * h * fa + h01 * yb + h11 * h * fb


class _Trajectory:
    """The outputs of one run and, on demand, their Hermite interpolants for one state."""

    def __init__(self, t, y, raw, p, model, wrt, limits):
        self.t, self.y, self.raw, self.p = t, y, raw, p
        self.model, self.wrt, self.limits = model, wrt, limits
        self._spec = None
        self._slopes: dict[int, _Slopes] = {}
        self._ends: dict[tuple[int, int], tuple] = {}

    def slopes(self, i: int) -> _Slopes:
        if i not in self._slopes:
            if self._spec is None:  # the model's expression tree, read once
                self._spec, _ = read_checked(self.model, self.limits)
            self._slopes[i] = _Slopes(self._spec, i, self.wrt)
        return self._slopes[i]

    def ends(self, i: int, a: int) -> tuple:
        """(f at a, s_i' at a) for state i at output index a (cached)."""
        key = (i, a)
        if key not in self._ends:
            self._ends[key] = self.slopes(i).at(float(self.t[a]), self.y[a], self.raw[a], self.p)
        return self._ends[key]

    def state(self, i: int, a: int, u: float) -> tuple[float, np.ndarray]:
        """(y_i, s_i (m,)) at t[a] + u (t[a+1] - t[a])."""
        if u == 0.0:
            return float(self.y[a, i]), self.raw[a, i].copy()
        if u == 1.0:
            return float(self.y[a + 1, i]), self.raw[a + 1, i].copy()
        h = float(self.t[a + 1] - self.t[a])
        (fa, sa), (fb, sb) = self.ends(i, a), self.ends(i, a + 1)
        yi = _hermite(u, h, self.y[a, i], fa[i], self.y[a + 1, i], fb[i])
        si = _hermite(u, h, self.raw[a, i], sa, self.raw[a + 1, i], sb)
        return float(yi), np.asarray(si, dtype=float)

    def states_at(self, i: int, a: int, u: float) -> np.ndarray:
        """Every state at t[a] + u h: Hermite for the states that state i's right-hand side
        reads, linear for the rest (which it does not read)."""
        ya, yb = self.y[a], self.y[a + 1]
        out = ya + u * (yb - ya)
        h = float(self.t[a + 1] - self.t[a])
        (fa, _), (fb, _) = self.ends(i, a), self.ends(i, a + 1)
        for k in self.slopes(i).deps:
            out[k] = _hermite(u, h, ya[k], fa[k], yb[k], fb[k])
        return out

    def cubic(self, i: int, a: int):
        """The Hermite polynomial of y_i on [t[a], t[a+1]] in u, as numpy coefficients."""
        h = float(self.t[a + 1] - self.t[a])
        (fa, _), (fb, _) = self.ends(i, a), self.ends(i, a + 1)
        ya, yb, ma, mb = float(self.y[a, i]), float(self.y[a + 1, i]), h * fa[i], h * fb[i]
        # y(u) = ya + ma u + (3(yb - ya) - 2 ma - mb) u^2 + (2(ya - yb) + ma + mb) u^3
        return np.array([2 * (ya - yb) + ma + mb, 3 * (yb - ya) - 2 * ma - mb, ma, ya])


def _normalised(raw: np.ndarray, theta: np.ndarray, value) -> list:
    if value is None or not math.isfinite(value) or value == 0:
        return [None] * len(raw)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        norm = raw * theta / value
    return [float(x) if math.isfinite(x) and th != 0 else None for x, th in zip(norm, theta)]


def _trapezoid(v: np.ndarray, t: np.ndarray):
    """The trapezoid rule over the output times (axis 0)."""
    if len(t) < 2:
        return 0.0 * v[0] if len(v) else 0.0
    dt = np.diff(t).reshape((-1,) + (1,) * (v.ndim - 1))
    return (0.5 * dt * (v[1:] + v[:-1])).sum(axis=0)


def _finite(x):
    x = float(x)
    return x if math.isfinite(x) else None


def _crossing(tr: _Trajectory, i: int, out: Output):
    """(t*, dt*/dθ (m,), note) of the first passage of y_i through out.value."""
    d = tr.y[:, i] - out.value
    rising = (d[:-1] < 0) & (d[1:] >= 0)
    falling = (d[:-1] > 0) & (d[1:] <= 0)
    hits = {"rising": rising, "falling": falling, "both": rising | falling}[out.direction]
    found = np.flatnonzero(hits)
    if not len(found):
        way = "" if out.direction == "both" else f" ({out.direction})"
        return None, None, (f"{out.state} does not pass {out.value:.6g}{way} between the output times "
                            f"(from {float(np.nanmin(tr.y[:, i])):.6g} to {float(np.nanmax(tr.y[:, i])):.6g})")
    a = int(found[0])
    c = tr.cubic(i, a)
    c[-1] -= out.value
    # the first root of the cubic in (0, 1]: c(0) = d[a] != 0 and c(1) = d[a+1] has the other
    # sign or is 0, so a sign change on a fine grid brackets it; then bisection
    grid = np.linspace(0.0, 1.0, 33)
    grid[-1] = 1.0
    vals = np.polyval(c, grid)
    vals[-1] = d[a + 1]
    k = int(np.flatnonzero((np.sign(vals) != np.sign(vals[0])))[0])
    lo, hi, flo = grid[k - 1], grid[k], vals[k - 1]
    if vals[k] == 0:
        lo = hi
    for _ in range(60):
        if hi - lo <= 1e-15:
            break
        mid = 0.5 * (lo + hi)
        fm = np.polyval(c, mid)
        if fm == 0:
            lo = hi = mid
        elif (fm > 0) == (flo > 0):
            lo, flo = mid, fm
        else:
            hi = mid
    u = 0.5 * (lo + hi)
    t_star = float(tr.t[a] + u * (tr.t[a + 1] - tr.t[a]))
    _, s = tr.state(i, a, u)
    slope = tr.slopes(i).rhs(t_star, tr.states_at(i, a, u), tr.p)
    if not math.isfinite(slope) or slope == 0:
        return t_star, None, f"{out.state} is stationary where it passes {out.value:.6g}: the delay's " \
                             "sensitivity is undefined"
    return t_star, -s / slope, None


def _maximum(tr: _Trajectory, i: int):
    """(t_max, y_max, s_i(t_max)): the largest output, refined to where the model's slope
    y_i' = f_i(t, y(t)) vanishes (bisection, y on the Hermite interpolants) in an interval
    beside it whose end slopes say the maximum lies inside."""
    yi = tr.y[:, i]
    g = int(np.nanargmax(yi))
    for a in (g - 1, g):
        if a < 0 or a + 1 >= len(tr.t):
            continue
        fa, fb = tr.ends(i, a)[0][i], tr.ends(i, a + 1)[0][i]
        if not (fa > 0 >= fb):
            continue
        h = float(tr.t[a + 1] - tr.t[a])

        def slope(u):
            return tr.slopes(i).rhs(float(tr.t[a] + u * h), tr.states_at(i, a, u), tr.p)

        lo, hi = 0.0, 1.0
        for _ in range(60):
            mid = 0.5 * (lo + hi)
            if slope(mid) > 0:
                lo = mid
            else:
                hi = mid
            if hi - lo < 1e-15:
                break
        u = 0.5 * (lo + hi)
        value, s = tr.state(i, a, u)
        if value >= yi[g]:
            return float(tr.t[a] + u * h), value, s
    return float(tr.t[g]), float(yi[g]), tr.raw[g, i].copy()


def _at(tr: _Trajectory, i: int, time: float):
    t = tr.t
    a = int(np.searchsorted(t, time, side="right")) - 1
    a = min(max(a, 0), len(t) - 1)
    if t[a] == time or a == len(t) - 1:
        return float(tr.y[a, i]), tr.raw[a, i].copy()
    return tr.state(i, a, float((time - t[a]) / (t[a + 1] - t[a])))


def rank(model: dict, state_names, wrt, theta, p, t, y, raw, outputs,
         limits: Limits | None = None) -> list[dict]:
    """The ranking of ``wrt`` (labels: parameter names and init:<state>, values ``theta``) for
    each output (``Output`` or its JSON), from one run: output times ``t`` (k,), states
    ``y`` (k, n), raw sensitivities ``raw`` (k, n, m) = dy/dθ, parameter values ``p`` (in the
    model's order). JSON-safe (None for what is undefined); never raises for numerical
    trouble: an output that cannot be computed gets a ``note`` and no entries' values."""
    limits = limits or DEFAULT_LIMITS
    t, y, raw = np.asarray(t, float), np.asarray(y, float), np.asarray(raw, float)
    theta, p = np.asarray(theta, float), np.asarray(p, float)
    wrt = list(wrt)
    index = {name: k for k, name in enumerate(state_names)}
    reactions = rate_constant_reactions(model)
    tr = _Trajectory(t, y, raw, p, model, wrt, limits)
    ranked = []
    for item in outputs:
        out = item if isinstance(item, Output) else Output.from_json(item)
        i = index[out.state]
        at_time, note, value, sens = None, None, None, None
        try:
            if len(t) == 0:
                note = "the run has no output times"
            elif out.summary == "final":
                at_time, value, sens = float(t[-1]), float(y[-1, i]), raw[-1, i]
            elif out.summary == "integral":
                value, sens = _trapezoid(y[:, i], t), _trapezoid(raw[:, i, :], t)
            elif out.summary == "max":
                at_time, value, sens = _maximum(tr, i)
            elif out.summary == "at":
                if not (t[0] <= out.t <= t[-1]):
                    note = f"t={out.t:.6g} is outside the output times [{t[0]:.6g}, {t[-1]:.6g}]"
                else:
                    at_time = float(out.t)
                    value, sens = _at(tr, i, float(out.t))
            elif out.summary == "crossing":
                at_time, sens, note = _crossing(tr, i, out)
                value = None if at_time is None else at_time - float(t[0])
            else:
                note = f"unknown summary '{out.summary}'"
        except (ArithmeticError, ValueError, IndexError) as e:  # numerical trouble: say so
            note, value, sens = f"could not be computed: {e}", None, None
        raw_list = [None] * len(wrt) if sens is None else [_finite(x) for x in sens]
        norm = _normalised(np.asarray(sens, float), theta, value) if sens is not None else [None] * len(wrt)
        entries = [{"wrt": label, "reactions": list(reactions.get(label, [])), "normalised": n, "raw": r}
                   for label, n, r in zip(wrt, norm, raw_list)]
        entries.sort(key=lambda e: (e["normalised"] is None, -abs(e["normalised"] or 0.0),
                                    -abs(e["raw"] or 0.0)))
        row = {"output": out.to_json(), "label": out.label(),
               "value": None if value is None else _finite(value),
               "t": None if at_time is None else _finite(at_time), "entries": entries}
        if note:
            row["note"] = note
        ranked.append(row)
    return ranked


__all__ = ["DIRECTIONS", "MAX_OUTPUTS", "Output", "SUMMARIES", "rank", "rate_constant_reactions"]
