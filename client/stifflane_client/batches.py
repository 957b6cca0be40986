"""Batches (sweeps): submit, follow, fetch the summary table as arrays; mixed into ``Client``."""
from __future__ import annotations

import uuid
from dataclasses import dataclass, field

import numpy as np

from stifflane_client.progress import poll_until_done
from stifflane_client.results import CAUTION, _array
from stifflane_client.spec import load_spec

BATCH_TERMINAL = ("succeeded", "failed", "cancelled")


@dataclass
class BatchTable:
    """One row per finished member: its index, varied values, summaries, outcome and message."""

    id: str
    index: np.ndarray
    values: dict
    summaries: dict
    outcome: list
    message: list
    complete: bool = True
    state: str = ""
    caution: str = CAUTION

    @classmethod
    def from_json(cls, body: dict) -> "BatchTable":
        cols = body.get("columns") or {}
        return cls(body.get("id", ""), np.array(cols.get("index") or [], dtype=int),
                   {k: _array(v) for k, v in (cols.get("values") or {}).items()},
                   {k: _array(v) for k, v in (cols.get("summaries") or {}).items()},
                   list(cols.get("outcome") or []), list(cols.get("message") or []),
                   bool(body.get("complete", True)), body.get("state", ""), body.get("caution") or CAUTION)

    def __len__(self) -> int:
        return len(self.index)

    def __getitem__(self, name: str) -> np.ndarray:
        if name in self.values:
            return self.values[name]
        if name in self.summaries:
            return self.summaries[name]
        raise KeyError(f"{name!r} is neither a varied value nor a summary")

    def failed(self) -> list[tuple[int, str, str]]:
        """(index, outcome, message) of every member that did not succeed."""
        return [(int(i), o, m) for i, o, m in zip(self.index, self.outcome, self.message) if o != "succeeded"]

    def to_dataframe(self):
        try:
            import pandas as pd
        except ImportError as e:
            raise ImportError("to_dataframe needs pandas: pip install 'stifflane-client[pandas]'") from e
        data = {**self.values, **self.summaries, "outcome": self.outcome, "message": self.message}
        return pd.DataFrame(data, index=pd.Index(self.index, name="index"))


@dataclass
class Batch:
    """The last seen view of a batch (``view`` is the server's JSON)."""

    view: dict = field(default_factory=dict)

    def __getattr__(self, name):
        try:
            return self.__dict__["view"][name]
        except KeyError:
            raise AttributeError(name) from None

    @property
    def done(self) -> bool:
        return self.view.get("state") in BATCH_TERMINAL


class BatchesMixin:
    """Batch methods of ``Client`` (uses ``self.http``)."""

    def submit_batch(self, spec, idempotency_key: str | None = None) -> Batch:
        """Submit a batch spec (dict, JSON file path or JSON text). Retried on 429/503 only: a
        lost connection is not retried, since the server may have created the batch."""
        key = idempotency_key or str(uuid.uuid4())
        resp = self.http.request("POST", "/v1/batches", json=load_spec(spec), ok=(200, 201, 202),
                                 headers={"Idempotency-Key": key})
        return Batch(resp.json())

    def batch(self, batch_id: str) -> Batch:
        return Batch(self.http.request("GET", f"/v1/batches/{batch_id}").json())

    def batches(self, limit: int = 50, pages: int | None = None):
        params, url, n = {"limit": limit}, "/v1/batches", 0
        while url and (pages is None or n < pages):
            resp = self.http.request("GET", url, params=params)
            for view in resp.json().get("items", []):
                yield Batch(view)
            url, params, n = resp.links.get("next", {}).get("url"), None, n + 1

    def wait_batch(self, batch_id: str, timeout: float | None = None, progress: bool = False,
                   poll: float = 0.5, max_poll: float = 3.0) -> Batch:
        """Poll until the batch ends; the bar shows members done and failed."""
        def describe(b: Batch) -> tuple[float, str]:
            p = b.view.get("progress") or {}
            return (float(p.get("fraction") or 0.0),
                    f"{b.view.get('state', '')} {p.get('succeeded', 0)} ok {p.get('failed', 0)} failed")

        return poll_until_done(lambda: self.batch(batch_id), describe, f"batch {batch_id}",
                               timeout, progress, poll, max_poll)

    def batch_table(self, batch_id: str) -> BatchTable:
        """The summary table (partial while the batch runs: ``complete`` is False)."""
        return BatchTable.from_json(self.http.request("GET", f"/v1/batches/{batch_id}/table").json())

    def batch_table_bytes(self, batch_id: str, format: str = "csv") -> bytes:
        if format not in ("json", "csv", "npz"):
            raise ValueError("format must be json, csv or npz")
        return self.http.request("GET", f"/v1/batches/{batch_id}/table", params={"format": format}).content

    def batch_statistics(self, batch_id: str) -> dict:
        return self.http.request("GET", f"/v1/batches/{batch_id}/statistics").json()

    def cancel_batch(self, batch_id: str) -> Batch:
        return Batch(self.http.request("POST", f"/v1/batches/{batch_id}/cancel", ok=(200, 202),
                                       retry_unsafe=True).json())
