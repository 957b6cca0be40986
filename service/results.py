"""Encode a stored result blob as JSON, CSV or NumPy .npz (content negotiation)."""
from __future__ import annotations

import csv
import io

import numpy as np

from jobs import blob as result_blob
from schemas.views import CAUTION, CAUTION_CSV_LINE, ResultSchema

FORMATS = {"json": "application/json", "csv": "text/csv", "npz": "application/x-npz"}
_ACCEPT_ALIASES = {"application/json": "json", "text/csv": "csv", "application/x-npz": "npz",
                   "application/octet-stream": "npz", "*/*": "json", "application/*": "json",
                   "text/*": "csv"}


def negotiate(format_param: str | None, accept) -> str | None:
    """The format to send, or None when nothing acceptable is on offer (406)."""
    if format_param:
        return format_param if format_param in FORMATS else None
    if not accept or not list(accept.values()):
        return "json"
    best = accept.best_match(list(_ACCEPT_ALIASES))
    return _ACCEPT_ALIASES.get(best) if best else None


def decode(blob: bytes) -> tuple[dict, dict]:
    return result_blob.decode(blob)


def as_json(job_id: str, blob: bytes) -> dict:
    meta, arrays = decode(blob)
    t, y, aux = arrays["t"], arrays["y"], arrays["aux"]
    finite = result_blob.json_safe  # JSON has no NaN or Infinity: those become null
    return ResultSchema().dump({
        "id": job_id, "outcome": meta["outcome"], "message": meta["message"],
        "times": finite(t),
        "states": {name: finite(y[:, i]) for i, name in enumerate(meta["state_names"])},
        "derived": {name: finite(aux[:, i]) for i, name in enumerate(meta["aux_names"])},
        "events": meta.get("events", []), "report": meta.get("report", {}), "model": meta.get("model", {}), "caution": CAUTION,
    })


def as_csv(blob: bytes) -> str:
    meta, arrays = decode(blob)
    table = np.column_stack([arrays["t"], arrays["y"], arrays["aux"]]) if len(arrays["t"]) else []
    buf = io.StringIO()
    buf.write(CAUTION_CSV_LINE + "\n")
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(["t", *meta["state_names"], *meta["aux_names"]])
    for row in table:
        writer.writerow([repr(float(v)) for v in row])
    return buf.getvalue()


def as_npz(blob: bytes) -> bytes:
    meta, arrays = decode(blob)
    buf = io.BytesIO()
    np.savez_compressed(buf, t=arrays["t"], y=arrays["y"], derived=arrays["aux"],
                        state_names=np.array(meta["state_names"], dtype=str),
                        derived_names=np.array(meta["aux_names"], dtype=str),
                        caution=np.array(CAUTION))
    return buf.getvalue()
