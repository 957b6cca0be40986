"""/v1/batches: submit, read, list, table, statistics, spec, cancel. Thin adapters over BatchStore.

Every endpoint answers 404 for another owner's batch, as if it did not exist.
"""
from __future__ import annotations

import math
from datetime import datetime, timezone

from flask import Blueprint, Response, current_app, json, request, url_for

from sweeps import sampling, summaries
from jobs.batch_store import BatchRecord, BatchStore, chunk_size_for
from jobs.blob import json_safe
from jobs.keys import is_job_id
from schemas.batch import BatchSpecSchema, design_of, member_count
from schemas.job import output_times
from service import batch_tables as tables
from service.auth import current_owner
from service.idempotency import idempotent
from service.jsonbody import read_json_object
from service.paging import next_link, page_args
from service.problems import ApiProblem
from schemas.views import CAUTION

bp = Blueprint("batches", __name__, url_prefix="/v1")
FORMATS = {"json": "application/json", "csv": "text/csv", "npz": "application/x-npz"}


def _ctx():
    return current_app.extensions["stifflane"]


def _store() -> BatchStore:
    """One BatchStore per app, sharing the job store's Redis client."""
    ext = current_app.extensions
    if "stifflane.batches" not in ext:
        ctx = _ctx()
        ext["stifflane.batches"] = BatchStore(ctx.store.r, ctx.settings)
    return ext["stifflane.batches"]


def _iso(ts):
    if ts is None:
        return None
    return datetime.fromtimestamp(ts, tz=timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def _links(batch_id: str) -> dict:
    return {name: url_for(f"batches.{view}", batch_id=batch_id)
            for name, view in (("self", "get_batch"), ("table", "get_table"),
                               ("statistics", "get_statistics"), ("spec", "get_spec"),
                               ("cancel", "cancel_batch"))}


def _view(rec: BatchRecord) -> dict:
    return json_safe({
        "id": rec.id, "state": rec.state, "label": rec.title, "created_at": _iso(rec.created),
        "started_at": _iso(rec.started), "finished_at": _iso(rec.finished),
        "cancel_requested": rec.cancel_requested, "chunk_size": rec.chunk_size, "chunks": rec.n_chunks,
        "progress": rec.progress(), "columns": rec.columns, "links": _links(rec.id)})


def _json(body, status: int = 200, headers: dict | None = None) -> Response:
    resp = Response(json.dumps(body), status=status, mimetype="application/json")
    for k, v in (headers or {}).items():
        resp.headers[k] = v
    return resp


def _find(batch_id: str) -> BatchRecord:
    rec = _store().get(batch_id) if is_job_id(batch_id) else None
    if rec is None or rec.owner != current_owner():
        raise ApiProblem(404, "Not Found", f"no batch with id {batch_id!r}", kind="batch-not-found")
    return rec


def _design_json(design: dict) -> dict:
    """The design as JSON (a list design's NaN 'keep the base value' becomes null)."""
    out = dict(design, columns=[list(c) for c in design["columns"]])
    if design["kind"] == "list":
        out["rows"] = [[None if isinstance(v, float) and math.isnan(v) else v for v in row]
                       for row in design["rows"]]
    return out


@bp.post("/batches")
def create_batch():
    """Submit a batch: a base job and its variations.
    ---
    post:
      summary: Submit a batch
      operationId: createBatch
      parameters: [IdempotencyKey]
      requestBody:
        required: true
        content: {application/json: {schema: BatchSpec}}
      responses:
        202:
          description: accepted; poll the Location
          headers: {Location: Location, Retry-After: RetryAfter}
          content: {application/json: {schema: BatchCreated}}
        409: Conflict
        413: PayloadTooLarge
        415: UnsupportedMediaType
        422: UnprocessableContent
    """
    body = read_json_object()
    return idempotent(lambda: _create(body))


def _create(body: dict):
    settings = _ctx().settings
    schema = BatchSpecSchema(max_members=settings.max_batch_members,
                             max_trajectory_values=settings.max_batch_trajectory_values)
    spec = schema.load(body)
    total = member_count(spec)
    design = _design_json(design_of(spec))
    columns = {"values": [sampling.column_label(t, n) for t, n in design["columns"]],
               "summaries": summaries.columns(spec["summaries"])}
    size = chunk_size_for(total, spec.get("chunk_size") or settings.batch_chunk_size, settings.batch_max_chunks)
    label = spec.get("label") or spec["base"].get("label") or spec["base"]["model"].get("title") or "untitled"
    store = _store()
    rec = store.create(schema.dump(spec), design, columns, total, size, label[:200], current_owner())
    for chunk in store.next_chunks(rec.id):  # the record is written first: it is the truth
        _ctx().publisher.publish_chunk(rec.id, chunk)
    return _json({"id": rec.id, "state": rec.state, "members": total, "links": _links(rec.id)}, 202,
                 {"Location": url_for("batches.get_batch", batch_id=rec.id), "Retry-After": "2"})


@bp.get("/batches")
def list_batches():
    """List your batches, newest first.
    ---
    get:
      summary: List your batches, newest first
      operationId: listBatches
      parameters: [Limit, Cursor]
      responses:
        200:
          description: a page of batches; Link rel=next when there is another
          content: {application/json: {schema: BatchPage}}
    """
    limit, cursor = page_args()
    records, next_cursor = _store().list(current_owner(), limit, cursor)
    headers = next_link("batches.list_batches", limit, next_cursor)
    return _json({"items": [_view(r) for r in records], "next_cursor": next_cursor}, 200, headers)


@bp.get("/batches/<batch_id>")
def get_batch(batch_id: str):
    """Read a batch: state and progress (counts, rate, time left).
    ---
    get:
      summary: Read a batch
      operationId: getBatch
      parameters: [BatchId]
      responses:
        200:
          description: the batch
          content: {application/json: {schema: BatchView}}
        404: NotFound
    """
    rec = _find(batch_id)
    return _json(_view(rec), 200, {"Cache-Control": "no-cache"})


@bp.get("/batches/<batch_id>/spec")
def get_spec(batch_id: str):
    """The batch spec as stored (defaults filled in).
    ---
    get:
      summary: The batch spec as stored
      operationId: getBatchSpec
      parameters: [BatchId]
      responses:
        200:
          description: the spec
          content: {application/json: {schema: BatchSpec}}
        404: NotFound
    """
    _find(batch_id)
    return _json(_store().spec(batch_id))


def _format() -> str:
    fmt = request.args.get("format")
    if fmt is None:
        best = request.accept_mimetypes.best_match(list(FORMATS.values()), default="application/json")
        fmt = {v: k for k, v in FORMATS.items()}.get(best, "json")
    if fmt not in FORMATS:
        raise ApiProblem(406, "Not Acceptable", "tables come as json, csv or npz (format= or Accept)")
    return fmt


@bp.get("/batches/<batch_id>/table")
def get_table(batch_id: str):
    """Rows of every finished member; while the batch runs, a partial table (``complete`` false).
    ---
    get:
      summary: The summary table (partial while running)
      operationId: getBatchTable
      parameters: [BatchId, Format]
      responses:
        200:
          description: one row per finished member
          content:
            application/json: {schema: BatchTable}
            text/csv: {schema: {type: string}}
            application/x-npz: {schema: {type: string, format: binary}}
        404: NotFound
        406: NotAcceptable
    """
    rec = _find(batch_id)
    fmt = _format()
    table = tables.assemble(_store(), rec)
    complete = rec.state not in ("queued", "running")
    headers = {"X-Batch-Complete": "true" if complete else "false", "Cache-Control": "no-cache"}
    if fmt == "csv":
        headers["Content-Disposition"] = f'attachment; filename="{batch_id}.csv"'
        return Response(tables.as_csv(table), mimetype="text/csv", headers=headers)
    if fmt == "npz":
        spec = _store().spec(batch_id)
        base = spec["base"]
        times = output_times(base["span"], base["output"]) if spec.get("trajectories") else None
        headers["Content-Disposition"] = f'attachment; filename="{batch_id}.npz"'
        return Response(tables.as_npz(table, times, list(base["model"].get("states", {}))),
                        mimetype="application/x-npz", headers=headers)
    body = {"id": rec.id, "state": rec.state, "complete": complete, "rows": len(table),
            "total": rec.total, "columns": tables.as_json(table), "caution": CAUTION}
    return _json(body, 200, headers)


@bp.get("/batches/<batch_id>/statistics")
def get_statistics(batch_id: str):
    """Mean, standard deviation, min, max and 5/50/95 % quantiles of each summary.
    ---
    get:
      summary: Statistics of each summary over the members that succeeded
      operationId: getBatchStatistics
      parameters: [BatchId]
      responses:
        200:
          description: statistics
          content: {application/json: {schema: BatchStatistics}}
        404: NotFound
    """
    rec = _find(batch_id)
    table = tables.assemble(_store(), rec)
    return _json({"id": rec.id, "state": rec.state, "complete": rec.state not in ("queued", "running"),
                  "rows": len(table), "outcomes": tables.outcome_counts(table),
                  "summaries": tables.statistics(table)})


@bp.post("/batches/<batch_id>/cancel")
def cancel_batch(batch_id: str):
    """Cancel a batch: waiting chunks never start, running ones stop at the next member.
    ---
    post:
      summary: Cancel a batch
      operationId: cancelBatch
      parameters: [BatchId]
      responses:
        202:
          description: cancellation recorded
          content: {application/json: {schema: BatchView}}
        404: NotFound
        409: Conflict
    """
    _find(batch_id)
    outcome = _store().cancel(batch_id)
    rec = _find(batch_id)
    if outcome == "succeeded":
        raise ApiProblem(409, "Already finished", "the batch already finished", kind="already-finished",
                         state=outcome)
    return _json(_view(rec), 202)
