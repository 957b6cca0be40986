"""Encode a stored result blob as JSON, CSV or NumPy .npz (content negotiation).

Every blob (jobs/blob.py) carries its arrays and a meta header; results written before
partial results existed lack ``partial``, ``t_reached``, ``t_end`` and ``units``, which are
derived here from the outcome and report instead.
"""
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


def decode(blob: bytes, outcome: str | None = None, message: str | None = None) -> tuple[dict, dict]:
    """(meta, arrays) of a blob, the meta completed: ``partial``, ``t_reached``, ``t_end``,
    ``units``. ``outcome``/``message`` replace the blob's (a live snapshot served for a job
    that ended without writing a result of its own: its worker was lost)."""
    meta, arrays = result_blob.decode(blob)
    if outcome is not None:
        meta["outcome"], meta["message"] = outcome, message or ""
    t = arrays["t"]
    report = meta.get("report") or {}
    meta.setdefault("partial", meta.get("outcome") != "succeeded")
    if meta.get("t_reached") is None:
        meta["t_reached"] = report.get("t_reached", float(t[-1]) if len(t) else None)
    meta.setdefault("t_end", None)
    meta.setdefault("units", {})
    return meta, arrays


def unit_list(meta: dict, names_key: str) -> list[str]:
    """The unit of each name in ``meta[names_key]`` ("" where it has none)."""
    units = meta.get("units") or {}
    return [units.get(n, "") for n in meta[names_key]]


def _state_of(meta: dict) -> str:
    """The state a blob's outcome implies (for callers that do not pass the job's own)."""
    outcome = meta.get("outcome")
    return {None: "running", "succeeded": "succeeded", "cancelled": "cancelled"}.get(outcome, "failed")


def as_json(job_id: str, blob: bytes, state: str | None = None, outcome: str | None = None,
            message: str | None = None) -> dict:
    meta, arrays = decode(blob, outcome, message)
    state = state or _state_of(meta)
    t, y, aux = arrays["t"], arrays["y"], arrays["aux"]
    finite = result_blob.json_safe  # JSON has no NaN or Infinity: those become null
    return ResultSchema().dump({
        "id": job_id, "state": state, "partial": bool(meta["partial"]),
        "t_reached": finite(meta["t_reached"]), "t_end": finite(meta["t_end"]),
        "outcome": meta["outcome"], "message": meta["message"] or "",
        "times": finite(t),
        "states": {name: finite(y[:, i]) for i, name in enumerate(meta["state_names"])},
        "derived": {name: finite(aux[:, i]) for i, name in enumerate(meta["aux_names"])},
        "events": meta.get("events", []), "report": meta.get("report", {}), "model": meta.get("model", {}),
        "units": dict(meta["units"]), "caution": CAUTION,
        **({"sensitivity": sens} if (sens := _sensitivity_json(meta, arrays)) is not None else {}),
    })


def sensitivities(meta: dict, arrays: dict):
    """(labels, raw (k, n, m), normalised (k, n, m)) of a result that carries sensitivities,
    else None; both arrays as the worker stored them (engine.sensitivities.split)."""
    info = meta.get("sensitivity")
    if not info or "sensitivity" not in arrays:
        return None
    return list(info["wrt"]), arrays["sensitivity"], arrays["sensitivity_normalised"]


def _sensitivity_json(meta: dict, arrays: dict) -> dict | None:
    found = sensitivities(meta, arrays)
    if found is None:
        return None
    labels, raw, norm = found
    finite = result_blob.json_safe
    names = meta["state_names"]
    return {"wrt": labels, "values": dict(zip(labels, finite(list(meta["sensitivity"]["theta"])))),
            "error_control": bool(meta["sensitivity"].get("error_control", True)),
            "raw": {name: {label: finite(raw[:, i, j]) for j, label in enumerate(labels)}
                    for i, name in enumerate(names)},
            "normalised": {name: {label: finite(norm[:, i, j]) for j, label in enumerate(labels)}
                           for i, name in enumerate(names)},
            **({"ranking": ranking} if (ranking := meta["sensitivity"].get("ranking")) is not None else {})}


def has_ranking(blob: bytes) -> bool:
    meta, _ = result_blob.decode(blob)
    return (meta.get("sensitivity") or {}).get("ranking") is not None


RANKING_COLUMNS = ["output", "state", "summary", "t", "value", "rank", "wrt", "reactions", "normalised", "raw",
                   "note"]


def ranking_csv(blob: bytes) -> str:
    """The ranking (sensitivity.rank of the spec) as one row per output and parameter, in each
    output's order (|normalised| descending); empty cells where a number is undefined."""
    meta, _ = result_blob.decode(blob)
    buf = io.StringIO()
    buf.write(CAUTION_CSV_LINE + "\n")
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(RANKING_COLUMNS)

    def cell(v):
        return "" if v is None else repr(float(v))

    for row in (meta.get("sensitivity") or {}).get("ranking") or []:
        out = row["output"]
        head = [row.get("label", ""), out["state"], out["summary"], cell(row.get("t")), cell(row.get("value"))]
        note = row.get("note", "")
        if not row["entries"]:
            writer.writerow([*head, "", "", "", "", "", note])
        for k, e in enumerate(row["entries"], start=1):
            writer.writerow([*head, k, e["wrt"], ";".join(e["reactions"]), cell(e["normalised"]), cell(e["raw"]),
                             note])
    return buf.getvalue()


def partial_line(meta: dict) -> str:
    """The CSV's second comment line for a partial result ("" for a whole one)."""
    if not meta["partial"]:
        return ""
    reached = "-" if meta["t_reached"] is None else f"{meta['t_reached']:.6g}"
    end = "" if meta["t_end"] is None else f" of {meta['t_end']:.6g}"
    why = meta["outcome"] or "running"
    return f"# partial: solved up to t = {reached}{end}; {why}"


def _label(name: str, unit: str) -> str:
    return f"{name} [{unit}]" if unit else name


def as_csv(blob: bytes, outcome: str | None = None, message: str | None = None) -> str:
    meta, arrays = decode(blob, outcome, message)
    columns = [arrays["t"], arrays["y"], arrays["aux"]]
    extra: list[str] = []
    found = sensitivities(meta, arrays)
    if found is not None:  # raw columns d(y)/d(θ), then normalised dln(y)/dln(θ), θ by θ
        labels, raw, norm = found
        k = len(arrays["t"])
        for j, label in enumerate(labels):
            columns += [raw[:, :, j].reshape(k, -1)]
            extra += [f"d({name})/d({label})" for name in meta["state_names"]]
        for j, label in enumerate(labels):
            columns += [norm[:, :, j].reshape(k, -1)]
            extra += [f"dln({name})/dln({label})" for name in meta["state_names"]]
    table = np.column_stack(columns) if len(arrays["t"]) else []
    buf = io.StringIO()
    buf.write(CAUTION_CSV_LINE + "\n")
    if meta["partial"]:
        buf.write(partial_line(meta) + "\n")
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(["t", *map(_label, meta["state_names"], unit_list(meta, "state_names")),
                     *map(_label, meta["aux_names"], unit_list(meta, "aux_names")), *extra])
    for row in table:
        writer.writerow([repr(float(v)) for v in row])
    return buf.getvalue()


def as_npz(blob: bytes, outcome: str | None = None, message: str | None = None) -> bytes:
    meta, arrays = decode(blob, outcome, message)
    buf = io.BytesIO()
    t_reached = np.nan if meta["t_reached"] is None else float(meta["t_reached"])
    found = sensitivities(meta, arrays)
    sens = {} if found is None else {"sensitivity_wrt": np.array(found[0], dtype=str),
                                     "sensitivity": found[1], "sensitivity_normalised": found[2]}
    np.savez_compressed(buf, **sens, t=arrays["t"], y=arrays["y"], derived=arrays["aux"],
                        state_names=np.array(meta["state_names"], dtype=str),
                        derived_names=np.array(meta["aux_names"], dtype=str),
                        state_units=np.array(unit_list(meta, "state_names"), dtype=str),
                        derived_units=np.array(unit_list(meta, "aux_names"), dtype=str),
                        partial=np.array(bool(meta["partial"])), t_reached=np.array(t_reached),
                        outcome=np.array(meta["outcome"] or ""), message=np.array(meta["message"] or ""),
                        caution=np.array(CAUTION))
    return buf.getvalue()
