"""Job specs from a dict, a JSON file, or a model written as Python data."""
from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass, field
from pathlib import Path


@dataclass
class Model:
    """A model in Python data; the field names are the model language's own keys.

    ``states`` maps a name to its initial value (or to {"initial": ..., "unit": ...});
    ``ddt`` maps a state to an expression string; ``reactions`` is a list of
    {"equation": "A + B -> C", "k": "k1"}. Expressions are text the server parses.
    """

    states: dict
    ddt: dict = field(default_factory=dict)
    parameters: dict = field(default_factory=dict)
    derived: dict = field(default_factory=dict)
    reactions: list = field(default_factory=list)
    events: list = field(default_factory=list)
    title: str | None = None
    description: str | None = None

    def to_dict(self) -> dict:
        out = {"states": dict(self.states)}
        for key in ("title", "description"):
            if getattr(self, key):
                out[key] = getattr(self, key)
        for key in ("parameters", "derived", "ddt", "reactions", "events"):
            if getattr(self, key):
                out[key] = getattr(self, key)
        return out


def job_spec(model, span, *, output: dict | None = None, count: int | None = None,
             spacing: str | None = None, times=None, rtol: float | None = None, atol=None,
             method: str | None = None, label: str | None = None, parameters: dict | None = None,
             initial: dict | None = None, nonnegative: bool | None = None,
             limits: dict | None = None, machine_code: str | None = None) -> dict:
    """Build a job spec; unset options take the server's defaults."""
    spec: dict = {"model": model.to_dict() if isinstance(model, Model) else dict(model),
                  "span": [float(span[0]), float(span[1])]}
    if output is None and (times is not None or count is not None):
        output = {"times": [float(t) for t in times]} if times is not None else {"count": int(count)}
        if spacing and count is not None:
            output["spacing"] = spacing
    if output:
        spec["output"] = output
    tol = {k: v for k, v in (("rtol", rtol), ("atol", atol)) if v is not None}
    if tol:
        spec["tolerance"] = tol
    for key, value in (("method", method), ("label", label), ("parameters", parameters),
                       ("initial", initial), ("nonnegative", nonnegative), ("limits", limits),
                       ("machine_code", machine_code)):
        if value is not None:
            spec[key] = value
    return spec


def _reject_constant(token: str):
    raise ValueError(f"non-finite number {token} in the spec: JSON has no NaN or Infinity")


def load_spec(source) -> dict:
    """A spec from a dict, a Model (wrapped needs span: use job_spec), a path, or JSON text."""
    if isinstance(source, dict):
        return source
    if isinstance(source, Model):
        raise TypeError("a Model needs a span and output: build the spec with job_spec(model, span, ...)")
    if isinstance(source, (str, os.PathLike)):
        text = str(source)
        if isinstance(source, os.PathLike) or not text.lstrip().startswith("{"):
            text = Path(source).read_text(encoding="utf-8")
        spec = json.loads(text, parse_constant=_reject_constant)
        if not isinstance(spec, dict):
            raise ValueError("a job spec is a JSON object")
        return spec
    raise TypeError(f"cannot make a job spec from {type(source).__name__}")


def is_finite_number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)
