"""A finished job's result as NumPy arrays (and a pandas DataFrame when pandas is present)."""
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
    """Output times ``t``, states ``y`` (len(t) x n_states) and derived quantities."""

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

    @classmethod
    def from_json(cls, body: dict) -> "Result":
        states, derived = body.get("states") or {}, body.get("derived") or {}
        t = _array(body.get("times") or [])
        y = np.column_stack([_array(v) for v in states.values()]) if states else np.zeros((len(t), 0))
        d = np.column_stack([_array(v) for v in derived.values()]) if derived else np.zeros((len(t), 0))
        return cls(body.get("id", ""), t, y, d, list(states), list(derived), body.get("outcome", ""),
                   body.get("message", ""), body.get("report") or {}, body.get("model") or {},
                   body.get("caution") or CAUTION)

    @classmethod
    def from_npz(cls, job_id: str, data: bytes) -> "Result":
        """From the server's .npz (arrays and the caution; the report comes with the JSON form)."""
        with np.load(io.BytesIO(data), allow_pickle=False) as z:
            caution = str(z["caution"]) if "caution" in z.files else CAUTION
            return cls(job_id, z["t"], z["y"], z["derived"], [str(s) for s in z["state_names"]],
                       [str(s) for s in z["derived_names"]], caution=caution)

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

    def to_dataframe(self):
        """A pandas DataFrame indexed by t (requires pandas)."""
        try:
            import pandas as pd
        except ImportError as e:  # optional dependency
            raise ImportError("to_dataframe needs pandas: pip install 'stifflane-client[pandas]'") from e
        frame = pd.DataFrame(self.table(), columns=self.columns)
        return frame.set_index("t")
