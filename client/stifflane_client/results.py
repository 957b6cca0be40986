"""A job's result as NumPy arrays (and a pandas DataFrame when pandas is present): whole for a
succeeded job, partial (``Result.partial``) for a failed, cancelled or running one."""
from __future__ import annotations

import io
from dataclasses import dataclass, field

import numpy as np

# The server's caution (schemas/views.py holds the same text; a test keeps them equal). The client
# stands alone, so it keeps a copy for results that arrive without one.
CAUTION = ("Numerical results are approximations. Before any engineering, safety or clinical "
           "decision (reactor design, relief sizing, dosing), have them checked by a qualified "
           "person against local codes and licensed practice.")


def _array(values) -> np.ndarray:
    # JSON carries NaN/inf as null: bring them back as NaN
    return np.array([np.nan if v is None else v for v in values], dtype=float)


@dataclass
class Result:
    """Output times ``t``, states ``y`` (len(t) x n_states) and derived quantities.

    ``partial`` is True for a failed, cancelled or still running job: the arrays then hold
    the output times reached, up to ``t_reached`` (``message`` says why it stopped).
    ``units`` maps state and parameter names to the model's unit labels (names without
    one are absent; the .npz form carries the states' and derived quantities' only).
    ``sensitivity`` is the JSON form's sensitivity block when the spec asked for one (wrt,
    values, raw and normalised by state and θ, and ``ranking`` with ``sensitivity.rank``)."""

    id: str
    t: np.ndarray
    y: np.ndarray
    derived: np.ndarray
    state_names: list[str]
    derived_names: list[str]
    outcome: str = ""
    message: str = ""
    report: dict = field(default_factory=dict)
    model: dict = field(default_factory=dict)
    caution: str = CAUTION
    state: str = ""
    partial: bool = False
    t_reached: float | None = None
    t_end: float | None = None
    units: dict = field(default_factory=dict)
    events: list = field(default_factory=list)
    sensitivity: dict = field(default_factory=dict)

    @classmethod
    def from_json(cls, body: dict) -> "Result":
        states, derived = body.get("states") or {}, body.get("derived") or {}
        t = _array(body.get("times") or [])
        y = np.column_stack([_array(v) for v in states.values()]) if states else np.zeros((len(t), 0))
        d = np.column_stack([_array(v) for v in derived.values()]) if derived else np.zeros((len(t), 0))
        return cls(body.get("id", ""), t, y, d, list(states), list(derived), body.get("outcome") or "",
                   body.get("message") or "", body.get("report") or {}, body.get("model") or {},
                   body.get("caution") or CAUTION, state=body.get("state") or "",
                   partial=bool(body.get("partial", False)), t_reached=body.get("t_reached"),
                   t_end=body.get("t_end"), units=dict(body.get("units") or {}),
                   events=list(body.get("events") or []), sensitivity=dict(body.get("sensitivity") or {}))

    @classmethod
    def from_npz(cls, job_id: str, data: bytes) -> "Result":
        """From the server's .npz (arrays, units, the partial flag and the caution; the report
        and events come with the JSON form)."""
        with np.load(io.BytesIO(data), allow_pickle=False) as z:
            files = set(z.files)

            def text(name: str) -> str:
                return str(z[name]) if name in files else ""

            state_names = [str(s) for s in z["state_names"]]
            derived_names = [str(s) for s in z["derived_names"]]
            units = {}
            for names, key in ((state_names, "state_units"), (derived_names, "derived_units")):
                if key in files:
                    units.update({n: str(u) for n, u in zip(names, z[key]) if str(u)})
            t_reached = float(z["t_reached"]) if "t_reached" in files else None
            return cls(job_id, z["t"], z["y"], z["derived"], state_names, derived_names,
                       outcome=text("outcome"), message=text("message"), caution=text("caution") or CAUTION,
                       partial=bool(z["partial"]) if "partial" in files else False,
                       t_reached=None if t_reached is None or np.isnan(t_reached) else t_reached,
                       units=units)

    def unit(self, name: str) -> str:
        """The unit label of a state, derived quantity or parameter ("" when it has none)."""
        return self.units.get(name, "")

    def __getitem__(self, name: str) -> np.ndarray:
        """The column of a state or derived quantity by name (``"t"`` for the times)."""
        if name == "t":
            return self.t
        if name in self.state_names:
            return self.y[:, self.state_names.index(name)]
        if name in self.derived_names:
            return self.derived[:, self.derived_names.index(name)]
        raise KeyError(f"{name!r} is neither a state nor a derived quantity")

    @property
    def columns(self) -> list[str]:
        return ["t", *self.state_names, *self.derived_names]

    def table(self) -> np.ndarray:
        """One 2-D array, columns in the order of ``columns`` (the CSV's layout)."""
        return np.column_stack([self.t, self.y, self.derived]) if len(self.t) else np.zeros((0, len(self.columns)))

    def sensitivities(self, state: str, normalised: bool = True) -> np.ndarray:
        """d ln y / d ln θ (or dy/dθ with ``normalised=False``) of ``state``: len(t) x len(θ),
        columns in the order of ``sensitivity["wrt"]`` (NaN where undefined)."""
        if not self.sensitivity:
            raise KeyError("this result has no sensitivities: the job spec names none (sensitivity)")
        by_label = self.sensitivity["normalised" if normalised else "raw"][state]
        return np.column_stack([_array(by_label[w]) for w in self.sensitivity["wrt"]])

    @property
    def ranking(self) -> list:
        """Per output named in the spec's sensitivity.rank: ``output``, ``label``, ``value``,
        ``t`` and ``entries`` [{wrt, reactions, normalised, raw}] by |normalised| descending
        ([] when the spec asked for no ranking)."""
        return list(self.sensitivity.get("ranking") or [])

    def ranking_table(self):
        """The ranking as a pandas DataFrame, one row per output and θ (the server's
        ``?table=ranking`` CSV): output, state, summary, t, value, rank, wrt, reactions,
        normalised, raw, note (requires pandas)."""
        try:
            import pandas as pd
        except ImportError as e:  # optional dependency
            raise ImportError("ranking_table needs pandas: pip install 'stifflane-client[pandas]'") from e
        rows = []
        for out in self.ranking:
            head = {"output": out.get("label", ""), "state": out["output"]["state"],
                    "summary": out["output"]["summary"], "t": out.get("t"), "value": out.get("value")}
            for k, e in enumerate(out.get("entries") or [], start=1):
                rows.append({**head, "rank": k, "wrt": e["wrt"], "reactions": ";".join(e.get("reactions") or []),
                             "normalised": e.get("normalised"), "raw": e.get("raw"), "note": out.get("note", "")})
        columns = ["output", "state", "summary", "t", "value", "rank", "wrt", "reactions", "normalised", "raw", "note"]
        frame = pd.DataFrame(rows, columns=columns)
        for name in ("t", "value", "normalised", "raw"):
            frame[name] = pd.to_numeric(frame[name], errors="coerce")
        return frame

    def to_dataframe(self):
        """A pandas DataFrame indexed by t (requires pandas)."""
        try:
            import pandas as pd
        except ImportError as e:  # optional dependency
            raise ImportError("to_dataframe needs pandas: pip install 'stifflane-client[pandas]'") from e
        frame = pd.DataFrame(self.table(), columns=self.columns)
        return frame.set_index("t")
