"""Calibrations (parameter estimation): submit, follow, fetch the estimate; mixed into ``Client``.

Views and estimates are plain dicts (the server's JSON). :func:`tables` turns an estimate
into tables: pandas DataFrames when pandas is importable, else dicts of columns (lists).
"""
from __future__ import annotations

import uuid
from typing import Iterator

from stifflane_client.errors import CalibrationFailed
from stifflane_client.progress import poll_until_done
from stifflane_client.spec import load_spec

CALIBRATION_TERMINAL = ("succeeded", "failed", "cancelled")
TABLES = ("parameters", "starts", "residuals", "correlation")


class _Polled:
    def __init__(self, view: dict):
        self.view = view

    @property
    def done(self) -> bool:
        return self.view.get("state") in CALIBRATION_TERMINAL


def _frame(columns: dict, index: str | None = None):
    """A DataFrame when pandas is importable, else the columns as they are."""
    try:
        import pandas as pd
    except ImportError:
        return columns
    frame = pd.DataFrame(columns)
    return frame.set_index(index) if index else frame


def tables(estimate: dict) -> dict:
    """{"parameters", "correlation", "starts", "residuals"} of an estimate, as DataFrames (pandas
    importable) or dicts of columns. Null (undefined) values become None (NaN in pandas)."""
    units = estimate.get("unknowns") or []
    names = [u.get("name") for u in units]
    parameters = {"name": names,
                  "estimate": [u.get("estimate") for u in units],
                  "standard_error": [u.get("standard_error") for u in units],
                  "ci95_low": [(u.get("ci95") or [None, None])[0] for u in units],
                  "ci95_high": [(u.get("ci95") or [None, None])[1] for u in units],
                  "at_bound": [u.get("at_bound") for u in units]}
    correlation = {"name": names, **{n: [row[j] if j < len(row) else None for row in estimate.get("correlation") or []]
                                      for j, n in enumerate(names)}}
    starts = estimate.get("starts") or []
    start_cols = {"index": [s.get("index") for s in starts], "status": [s.get("status") for s in starts],
                  "sum_of_squares": [s.get("sum_of_squares") for s in starts],
                  "evaluations": [s.get("evaluations") for s in starts],
                  "failed_solves": [s.get("failed_solves") for s in starts],
                  "seconds": [s.get("seconds") for s in starts],
                  **{f"x0_{n}": [(s.get("x0") or [None] * len(names))[j] for s in starts] for j, n in enumerate(names)},
                  **{f"x_{n}": [(s.get("x") or [None] * len(names))[j] for s in starts] for j, n in enumerate(names)},
                  "message": [s.get("message") for s in starts]}
    residuals = {"experiment": [], "observable": [], "t": [], "observed": [], "fitted": [], "residual": []}
    for e in estimate.get("experiments") or []:
        for obs, res in (e.get("residuals") or {}).items():
            observed = (e.get("observed") or {}).get(obs) or []
            fitted = (e.get("fitted") or {}).get(obs) or []
            for k, t in enumerate(e.get("times") or []):
                for col, v in (("experiment", e.get("name")), ("observable", obs), ("t", t),
                               ("observed", observed[k] if k < len(observed) else None),
                               ("fitted", fitted[k] if k < len(fitted) else None),
                               ("residual", res[k] if k < len(res) else None)):
                    residuals[col].append(v)
    return {"parameters": _frame(parameters, "name"), "correlation": _frame(correlation, "name"),
            "starts": _frame(start_cols, "index"), "residuals": _frame(residuals)}


class CalibrationsMixin:
    """Calibration methods of ``Client`` (uses ``self.http``)."""

    def submit_calibration(self, spec, idempotency_key: str | None = None) -> dict:
        """Submit a calibration spec (dict, JSON file path or JSON text); returns the 202 reply
        (id, state, starts, data). One Idempotency-Key per call, reused on every retry."""
        key = idempotency_key or str(uuid.uuid4())
        return self.http.request("POST", "/v1/calibrations", json=load_spec(spec), ok=(200, 201, 202),
                                 headers={"Idempotency-Key": key}, retry_unsafe=True,
                                 retry_status=(409, 429, 503)).json()

    def calibration(self, cal_id: str) -> dict:
        """The calibration's view: state, stage, progress (starts done and failed, best so far)."""
        return self.http.request("GET", f"/v1/calibrations/{cal_id}").json()

    def calibrations(self, limit: int = 50, pages: int | None = None) -> Iterator[dict]:
        """Your calibrations, newest first, following the Link rel=next cursor."""
        params, url, n = {"limit": limit}, "/v1/calibrations", 0
        while url and (pages is None or n < pages):
            resp = self.http.request("GET", url, params=params)
            yield from resp.json().get("items", [])
            url, params, n = resp.links.get("next", {}).get("url"), None, n + 1

    def wait_calibration(self, cal_id: str, timeout: float | None = None, progress: bool = False,
                         poll: float = 0.25, max_poll: float = 2.0) -> dict:
        """Poll until the calibration ends; returns its last view. The bar shows starts done."""
        def describe(item: _Polled) -> tuple[float, str]:
            p = item.view.get("progress") or {}
            best = p.get("best_sum_of_squares")
            return (float(p.get("fraction") or 0.0),
                    f"{item.view.get('state', '')} {p.get('done', 0)} done {p.get('failed', 0)} failed"
                    + (f" best {best:.4g}" if isinstance(best, (int, float)) else ""))

        return poll_until_done(lambda: _Polled(self.calibration(cal_id)), describe, f"calibration {cal_id}",
                               timeout, progress, poll, max_poll).view

    def calibration_result(self, cal_id: str) -> dict:
        """The estimate (see docs/calibration.md); ApiError 409 until the calibration succeeded."""
        return self.http.request("GET", f"/v1/calibrations/{cal_id}/result").json()

    def calibration_tables(self, cal_id: str) -> dict:
        """The estimate's tables (parameters, correlation, starts, residuals); DataFrames with pandas."""
        return tables(self.calibration_result(cal_id))

    def calibration_bytes(self, cal_id: str, format: str = "csv", table: str = "parameters") -> bytes:
        if format not in ("json", "csv"):
            raise ValueError("format must be json or csv")
        if table not in TABLES:
            raise ValueError(f"table must be one of {', '.join(TABLES)}")
        params = {"format": format, **({"table": table} if format == "csv" else {})}
        return self.http.request("GET", f"/v1/calibrations/{cal_id}/result", params=params).content

    def cancel_calibration(self, cal_id: str) -> dict:
        return self.http.request("POST", f"/v1/calibrations/{cal_id}/cancel", ok=(200, 202),
                                 retry_unsafe=True).json()

    def calibrate(self, spec, timeout: float | None = None, progress: bool = False) -> dict:
        """Submit, wait and return the estimate; raises CalibrationFailed (with the last view)
        when the calibration failed or was cancelled."""
        view = self.wait_calibration(self.submit_calibration(spec)["id"], timeout=timeout, progress=progress)
        if view.get("state") != "succeeded":
            raise CalibrationFailed(view)
        return self.calibration_result(view["id"])
