"""/v1/calibrations: submit, read, list, result (JSON or CSV tables), spec, cancel.

Thin adapters over CalibrationStore (jobs/calibration_store.py); the starts run on the
worker pool in chunks, then one summary task writes the estimate (docs/calibration.md).
Every endpoint answers 404 for another owner's calibration, as if it did not exist.
"""
from __future__ import annotations

import csv
import io
from datetime import datetime, timezone

from flask import Blueprint, Response, current_app, json, request, url_for

from jobs.blob import json_safe
from jobs.calibration_store import CalibrationRecord, CalibrationStore
from jobs.keys import is_job_id
from schemas.calibration import CAUTION, CalibrationSpecSchema, Limits, issue_pointer, problem_of
from service.auth import current_owner
from service.idempotency import idempotent
from service.jsonbody import read_json_object
from service.paging import next_link, page_args
from service.problems import ApiProblem

bp = Blueprint("calibrations", __name__, url_prefix="/v1")
FORMATS = {"json": "application/json", "csv": "text/csv"}
TABLES = ("parameters", "starts", "residuals", "correlation")


def _ctx():
    return current_app.extensions["stifflane"]


def _store() -> CalibrationStore:
    """One CalibrationStore per app, sharing the job store's Redis client."""
    ext = current_app.extensions
    if "stifflane.calibrations" not in ext:
        ctx = _ctx()
        ext["stifflane.calibrations"] = CalibrationStore(ctx.store.r, ctx.settings)
    return ext["stifflane.calibrations"]


def _iso(ts):
    if ts is None:
        return None
    return datetime.fromtimestamp(ts, tz=timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def _links(cal_id: str) -> dict:
    return {name: url_for(f"calibrations.{view}", calibration_id=cal_id)
            for name, view in (("self", "get_calibration"), ("result", "get_result"),
                               ("spec", "get_spec"), ("cancel", "cancel_calibration"))}


def _view(rec: CalibrationRecord) -> dict:
    return json_safe({
        "id": rec.id, "state": rec.state, "stage": rec.stage, "label": rec.title,
        "created_at": _iso(rec.created), "started_at": _iso(rec.started), "finished_at": _iso(rec.finished),
        "cancel_requested": rec.cancel_requested, "message": rec.message or None,
        "chunk_size": rec.chunk_size, "chunks": rec.n_chunks, "unknowns": rec.unknowns, "data": rec.data,
        "progress": rec.progress(), "links": _links(rec.id)})


def _json(body, status: int = 200, headers: dict | None = None) -> Response:
    resp = Response(json.dumps(body), status=status, mimetype="application/json")
    for k, v in (headers or {}).items():
        resp.headers[k] = v
    return resp


def _find(cal_id: str) -> CalibrationRecord:
    rec = _store().get(cal_id) if is_job_id(cal_id) else None
    if rec is None or rec.owner != current_owner():
        raise ApiProblem(404, "Not Found", f"no calibration with id {cal_id!r}", kind="calibration-not-found")
    return rec


def _body_limit() -> int:
    s = _ctx().settings
    return min(s.max_calibration_body_bytes, s.max_body_bytes)


@bp.post("/calibrations")
def create_calibration():
    """Submit a calibration: a model, experiments with measurements, the unknowns to estimate.
    ---
    post:
      summary: Submit a calibration
      operationId: createCalibration
      parameters: [IdempotencyKey]
      requestBody:
        required: true
        content: {application/json: {schema: CalibrationSpec}}
      responses:
        202:
          description: accepted; poll the Location
          headers: {Location: Location, Retry-After: RetryAfter}
          content: {application/json: {schema: CalibrationCreated}}
        409: Conflict
        413: PayloadTooLarge
        415: UnsupportedMediaType
        422: UnprocessableContent
        429: TooManyRequests
    """
    limit = _body_limit()
    if request.content_length is not None and request.content_length > limit:
        raise ApiProblem(413, "Content Too Large",
                         f"the calibration body is {request.content_length} bytes; the limit is {limit} bytes "
                         f"({limit / 1048576:g} MiB): thin the measurements or split the experiments over "
                         "several calibrations", kind="body-too-large", limit_bytes=limit)
    body = read_json_object()
    return idempotent(lambda: _create(body))


def _create(body: dict):
    settings = _ctx().settings
    schema = CalibrationSpecSchema(limits=Limits.of(settings))
    spec = schema.load(body)
    built = problem_of(spec)
    from calibration.problem import check  # the numerics' own checks (no compiled kernels)

    issues = check(built.problem)
    if issues:
        errors = []
        for issue in issues:
            pointer, prefix = issue_pointer(issue.path, built)
            errors.append({"pointer": pointer, "detail": prefix + issue.message})
        raise ApiProblem(422, "Invalid calibration spec", f"{len(errors)} problem(s) in the request body; see errors",
                         kind="invalid-spec", errors=errors)
    store, owner = _store(), current_owner()
    if store.active_count(owner) >= settings.max_active_calibrations:
        raise ApiProblem(429, "Too Many Requests", f"{settings.max_active_calibrations} calibrations are queued or "
                         "running for this key; wait for one to finish", kind="quota",
                         headers={"Retry-After": "10"})
    label = spec.get("label") or spec["model"].get("title") or "untitled"
    rec = store.create(schema.dump(spec), built.data, [u["name"] for u in spec["unknowns"]], spec["starts"],
                       max(1, settings.calibration_chunk_size), spec["seed"], label[:200], owner)
    for chunk in store.next_chunks(rec.id):  # the record is written first: it is the truth
        _ctx().publisher.publish_calibration(rec.id, chunk)
    return _json({"id": rec.id, "state": rec.state, "starts": rec.total, "data": built.data,
                  "links": _links(rec.id)}, 202,
                 {"Location": url_for("calibrations.get_calibration", calibration_id=rec.id), "Retry-After": "2"})


@bp.get("/calibrations")
def list_calibrations():
    """List your calibrations, newest first.
    ---
    get:
      summary: List your calibrations, newest first
      operationId: listCalibrations
      parameters: [Limit, Cursor]
      responses:
        200:
          description: a page of calibrations; Link rel=next when there is another
          content: {application/json: {schema: CalibrationPage}}
    """
    limit, cursor = page_args()
    records, next_cursor = _store().list(current_owner(), limit, cursor)
    headers = next_link("calibrations.list_calibrations", limit, next_cursor)
    return _json({"items": [_view(r) for r in records], "next_cursor": next_cursor}, 200, headers)


@bp.get("/calibrations/<calibration_id>")
def get_calibration(calibration_id: str):
    """Read a calibration: state and progress (starts done and failed, best sum of squares so far).
    ---
    get:
      summary: Read a calibration
      operationId: getCalibration
      parameters: [CalibrationId]
      responses:
        200:
          description: the calibration
          content: {application/json: {schema: CalibrationView}}
        404: NotFound
    """
    return _json(_view(_find(calibration_id)), 200, {"Cache-Control": "no-cache"})


@bp.get("/calibrations/<calibration_id>/spec")
def get_spec(calibration_id: str):
    """The calibration spec as stored (defaults filled in).
    ---
    get:
      summary: The calibration spec as stored
      operationId: getCalibrationSpec
      parameters: [CalibrationId]
      responses:
        200:
          description: the spec
          content: {application/json: {schema: CalibrationSpec}}
        404: NotFound
    """
    _find(calibration_id)
    return _json(_store().spec(calibration_id))


def _format() -> str:
    fmt = request.args.get("format")
    if fmt is None:
        best = request.accept_mimetypes.best_match(list(FORMATS.values()), default="application/json")
        fmt = {v: k for k, v in FORMATS.items()}.get(best, "json")
    if fmt not in FORMATS:
        raise ApiProblem(406, "Not Acceptable", "estimates come as json or csv (format= or Accept)")
    return fmt


@bp.get("/calibrations/<calibration_id>/result")
def get_result(calibration_id: str):
    """The estimate: parameters with standard errors and 95 % intervals, correlation, fit statistics,
    every start's outcome, residuals and fitted curves; CSV gives one table (``table=``).
    ---
    get:
      summary: The estimate (JSON) or one of its tables (CSV)
      operationId: getCalibrationResult
      parameters:
        - CalibrationId
        - {name: format, in: query, description: overrides Accept, schema: {type: string, enum: [json, csv]}}
        - name: table
          in: query
          description: "CSV only: parameters (default), starts, residuals or correlation"
          schema: {type: string, enum: [parameters, starts, residuals, correlation]}
      responses:
        200:
          description: the estimate
          content:
            application/json: {schema: Estimate}
            text/csv: {schema: {type: string}}
        404: NotFound
        406: NotAcceptable
        409: Conflict
    """
    rec = _find(calibration_id)
    fmt = _format()
    which = request.args.get("table", "parameters")
    if which not in TABLES:
        raise ApiProblem(400, "Bad Request", f"table must be one of {', '.join(TABLES)}",
                         errors=[{"pointer": "/query/table", "detail": "one of " + ", ".join(TABLES)}])
    estimate = _store().estimate(calibration_id) if rec.state == "succeeded" else None
    if estimate is None:
        detail = {"queued": "the calibration has not started; poll it until it succeeds",
                  "running": "the starts are still running (the view shows the best sum of squares so far)",
                  }.get(rec.state, f"the calibration {rec.state} and has no estimate"
                        + (f": {rec.message}" if rec.message else ""))
        raise ApiProblem(409, "No estimate", detail, kind="no-estimate", state=rec.state)
    if fmt == "csv":
        return Response(as_csv(estimate, which), mimetype="text/csv", headers={
            "Content-Disposition": f'attachment; filename="{calibration_id}-{which}.csv"'})
    return _json({"id": rec.id, "state": rec.state, **estimate, "caution": estimate.get("caution") or CAUTION})


def _cell(v) -> str:
    if v is None:
        return ""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return repr(v)
    return str(v)


def as_csv(estimate: dict, which: str) -> str:
    """One table of the estimate as CSV, after a caution comment line."""
    out = io.StringIO()
    out.write("# caution: " + (estimate.get("caution") or CAUTION) + "\n")
    w = csv.writer(out, lineterminator="\n")
    if which == "parameters":
        w.writerow(["name", "estimate", "standard_error", "ci95_low", "ci95_high", "at_bound"])
        for u in estimate.get("unknowns", []):
            lo, hi = (u.get("ci95") or [None, None])[:2]
            w.writerow([_cell(v) for v in (u.get("name"), u.get("estimate"), u.get("standard_error"), lo, hi,
                                           u.get("at_bound"))])
    elif which == "starts":
        names = [u.get("name") for u in estimate.get("unknowns", [])]
        w.writerow(["index", "status", "sum_of_squares", "evaluations", "failed_solves", "seconds",
                    *[f"x0_{n}" for n in names], *[f"x_{n}" for n in names], "message"])
        for s in estimate.get("starts", []):
            w.writerow([_cell(v) for v in (s.get("index"), s.get("status"), s.get("sum_of_squares"),
                                           s.get("evaluations"), s.get("failed_solves"), s.get("seconds"),
                                           *(s.get("x0") or []), *(s.get("x") or []), s.get("message"))])
    elif which == "residuals":
        w.writerow(["experiment", "observable", "t", "observed", "fitted", "residual"])
        for e in estimate.get("experiments", []):
            for obs, res in (e.get("residuals") or {}).items():
                observed = (e.get("observed") or {}).get(obs) or []
                fitted = (e.get("fitted") or {}).get(obs) or []
                for k, t in enumerate(e.get("times") or []):
                    w.writerow([_cell(v) for v in (e.get("name"), obs, t, _at(observed, k), _at(fitted, k),
                                                   _at(res, k))])
    else:
        names = [u.get("name") for u in estimate.get("unknowns", [])]
        w.writerow(["", *names])
        for name, row in zip(names, estimate.get("correlation") or []):
            w.writerow([name, *[_cell(v) for v in row]])
    return out.getvalue()


def _at(values, k):
    return values[k] if k < len(values) else None


@bp.post("/calibrations/<calibration_id>/cancel")
def cancel_calibration(calibration_id: str):
    """Cancel a calibration: starts not yet run never run, running chunks stop at their next start.
    ---
    post:
      summary: Cancel a calibration
      operationId: cancelCalibration
      parameters: [CalibrationId]
      responses:
        202:
          description: cancellation recorded
          content: {application/json: {schema: CalibrationView}}
        404: NotFound
        409: Conflict
    """
    _find(calibration_id)
    outcome = _store().cancel(calibration_id)
    rec = _find(calibration_id)
    if outcome in ("succeeded", "failed"):
        raise ApiProblem(409, "Already finished", f"the calibration already {outcome}", kind="already-finished",
                         state=outcome)
    if outcome == "summarising":
        raise ApiProblem(409, "Summarising", "every start is in and the estimate is being computed; it will be "
                         "ready in moments", kind="summarising", state=rec.state)
    return _json(_view(rec), 202)
