"""A batch's result table, assembled on read from its chunk blobs, and its exports.

Rows exist for every member whose chunk has finished (done, cancelled or lost),
so a running batch already gives a partial table. Member values are rebuilt from
the stored design (sweeps/sampling.py), never stored per member.
"""
from __future__ import annotations

import csv
import io
from dataclasses import dataclass

import numpy as np

from sweeps import sampling
from jobs import blob as result_blob
from jobs.batch_store import BatchRecord, BatchStore
from schemas.views import CAUTION, CAUTION_CSV_LINE

QUANTILES = (5, 50, 95)
LOST = "worker_lost"
LOST_MESSAGE = ("the worker running this member's chunk died repeatedly; the chunk was not retried "
                "again (look for members that overflow or exhaust memory)")


@dataclass
class Table:
    index: np.ndarray            # (m,) member indexes, ascending
    value_names: list
    values: np.ndarray           # (m, d)
    summary_names: list
    summaries: np.ndarray        # (m, s)
    outcomes: list
    messages: list               # "" for members that succeeded
    trajectories: np.ndarray | None = None   # (m, n_out, n_states) when the batch kept them

    def __len__(self) -> int:
        return len(self.index)


def _rows_without_result(start, stop, n_sum, outcome, message):
    m = stop - start
    return np.arange(start, stop), np.full((m, n_sum), np.nan), [outcome] * m, [message] * m


def assemble(store: BatchStore, rec: BatchRecord) -> Table:
    """Every finished member of ``rec``, in index order."""
    design = store.design(rec.id)
    states = store.chunk_states(rec.id)
    settled_cancel = rec.state == "cancelled"
    n_sum = len(rec.columns["summaries"])
    parts, traj = [], []
    done = sorted(i for i, s in states.items() if s == "d")
    blobs = dict(store.chunk_results(rec.id, done))
    for i in range(rec.n_chunks):
        start, stop = i * rec.chunk_size, min((i + 1) * rec.chunk_size, rec.total)
        s = states.get(i)
        if s == "d" and blobs.get(i) is not None:
            meta, arrays = result_blob.decode(blobs[i])
            msgs = meta["messages"]
            parts.append((np.arange(start, stop), arrays["summaries"].reshape(stop - start, n_sum),
                          meta["outcomes"], [msgs.get(str(k), "") for k in range(start, stop)]))
            if "trajectories" in arrays:
                traj.append(arrays["trajectories"])
        elif s == "d":
            parts.append(_rows_without_result(start, stop, n_sum, "expired", "the result has expired"))
        elif s == "x":
            parts.append(_rows_without_result(start, stop, n_sum, LOST, LOST_MESSAGE))
        elif s == "c" or (s is None and settled_cancel):
            parts.append(_rows_without_result(start, stop, n_sum, "cancelled", "cancelled before it started"))
    if not parts:
        index = np.zeros(0, dtype=np.int64)
        return Table(index, rec.columns["values"], np.zeros((0, len(rec.columns["values"]))),
                     rec.columns["summaries"], np.zeros((0, n_sum)), [], [])
    index = np.concatenate([p[0] for p in parts])
    return Table(index=index, value_names=rec.columns["values"], values=_values(design, index),
                 summary_names=rec.columns["summaries"], summaries=np.vstack([p[1] for p in parts]),
                 outcomes=[o for p in parts for o in p[2]], messages=[m for p in parts for m in p[3]],
                 trajectories=np.concatenate(traj) if traj and len(traj) == len(parts) else None)


def _values(design: dict, index: np.ndarray) -> np.ndarray:
    if not len(index):
        return np.zeros((0, len(design["columns"])))
    cache: dict = {}
    full = sampling.member_values(design, int(index[0]), int(index[-1]) + 1, cache)
    return full[index - index[0]]


def statistics(table: Table) -> dict:
    """Per summary over the members that succeeded with a finite value: count, mean, std, quantiles."""
    ok = np.array([o == "succeeded" for o in table.outcomes], dtype=bool)
    out = {}
    for j, name in enumerate(table.summary_names):
        col = table.summaries[ok, j] if len(table) else np.zeros(0)
        col = col[np.isfinite(col)]
        if not len(col):
            out[name] = {"count": 0, "mean": None, "std": None, "min": None, "max": None,
                         **{f"q{q:02d}": None for q in QUANTILES}}
            continue
        qs = np.percentile(col, QUANTILES)
        out[name] = {"count": int(len(col)), "mean": float(col.mean()),
                     "std": float(col.std(ddof=1)) if len(col) > 1 else 0.0,
                     "min": float(col.min()), "max": float(col.max()),
                     **{f"q{q:02d}": float(v) for q, v in zip(QUANTILES, qs)}}
    return out


def outcome_counts(table: Table) -> dict:
    names, counts = np.unique(np.array(table.outcomes, dtype=object).astype(str), return_counts=True)
    return {str(n): int(c) for n, c in zip(names, counts)}


def as_json(table: Table) -> dict:
    """Columnar JSON (one list per column); NaN and infinities become null."""
    safe = result_blob.json_safe
    return {"index": table.index.tolist(),
            "values": {n: safe(table.values[:, j]) for j, n in enumerate(table.value_names)},
            "summaries": {n: safe(table.summaries[:, j]) for j, n in enumerate(table.summary_names)},
            "outcome": list(table.outcomes), "message": list(table.messages)}


def as_csv(table: Table) -> str:
    """One row per member: index, values, summaries, outcome, message (empty cell for NaN)."""
    buf = io.StringIO()
    buf.write(CAUTION_CSV_LINE + "\n")
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["index", *table.value_names, *table.summary_names, "outcome", "message"])
    numbers = np.column_stack([table.values, table.summaries]) if len(table) else np.zeros((0, 0))
    for k in range(len(table)):
        cells = ["" if not np.isfinite(v) else repr(float(v)) for v in numbers[k]]
        w.writerow([int(table.index[k]), *cells, table.outcomes[k], table.messages[k]])
    return buf.getvalue()


def as_npz(table: Table, output_times: np.ndarray | None, state_names: list) -> bytes:
    buf = io.BytesIO()
    extra = {}
    if table.trajectories is not None and output_times is not None:
        extra = {"trajectories": table.trajectories, "times": output_times,
                 "state_names": np.array(state_names, dtype=str)}
    np.savez_compressed(buf, index=table.index, values=table.values,
                        value_names=np.array(table.value_names, dtype=str), summaries=table.summaries,
                        summary_names=np.array(table.summary_names, dtype=str),
                        outcome=np.array(table.outcomes, dtype=str), message=np.array(table.messages, dtype=str),
                        caution=np.array(CAUTION), **extra)
    return buf.getvalue()
