"""/v1/jobs: create, read, list, result, spec, cancel. Thin adapters over JobStore."""
from __future__ import annotations

from datetime import datetime, timezone

from flask import Blueprint, Response, current_app, json, request, url_for

from jobs.keys import STATES, is_job_id
from jobs.store import JobRecord, make_etag
from schemas.job import JobSpecSchema, describe_model
from schemas.views import CreatedSchema, JobPageSchema, JobViewSchema
from service import results
from service.auth import current_owner
from service.idempotency import idempotent
from service.jsonbody import read_json_object
from service.paging import next_link, page_args
from service.problems import ApiProblem

bp = Blueprint("jobs", __name__, url_prefix="/v1")


def _ctx():
    return current_app.extensions["stifflane"]


def _iso(ts: float | None) -> str | None:
    if ts is None:
        return None
    return datetime.fromtimestamp(ts, tz=timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def _links(job_id: str) -> dict:
    return {"self": url_for("jobs.get_job", job_id=job_id),
            "result": url_for("jobs.get_result", job_id=job_id),
            "cancel": url_for("jobs.cancel_job", job_id=job_id)}


def _view_data(rec: JobRecord) -> dict:
    return {
        "id": rec.id, "state": rec.state, "progress": rec.progress, "title": rec.title,
        "method": rec.method, "created_at": _iso(rec.created), "started_at": _iso(rec.started),
        "finished_at": _iso(rec.finished), "attempt": rec.attempt,
        "cancel_requested": rec.cancel_requested, "outcome": rec.outcome, "message": rec.message,
        "digest": rec.summary, "owner": rec.owner, "links": _links(rec.id)}


def _view(rec: JobRecord) -> dict:
    return JobViewSchema().dump(_view_data(rec))


def _json(body, status: int = 200, headers: dict | None = None) -> Response:
    resp = Response(json.dumps(body), status=status, mimetype="application/json")
    for k, v in (headers or {}).items():
        resp.headers[k] = v
    return resp


def _find(job_id: str) -> JobRecord:
    """The caller's job; another owner's job is 404, exactly like a missing one."""
    rec = _ctx().store.get(job_id, owner=current_owner()) if is_job_id(job_id) else None
    if rec is None:
        raise ApiProblem(404, "Not Found", f"no job with id {job_id!r}", kind="job-not-found")
    return rec


@bp.post("/jobs")
def create_job():
    """Create an integration job.
    ---
    post:
      summary: Create an integration job
      operationId: createJob
      parameters: [IdempotencyKey]
      requestBody:
        required: true
        content: {application/json: {schema: JobSpec}}
      responses:
        202:
          description: accepted; poll the Location
          headers: {Location: Location, Retry-After: RetryAfter, ETag: ETag}
          content: {application/json: {schema: Created}}
        409: Conflict
        413: PayloadTooLarge
        415: UnsupportedMediaType
        422: UnprocessableContent
    """
    body = read_json_object()
    return idempotent(lambda: _create(body))


def _create(body: dict) -> Response:
    spec = JobSpecSchema().load(body)
    ctx, owner = _ctx(), current_owner()
    _check_output_cap(spec, ctx.settings.max_output_points)
    if ctx.store.active_count(owner) >= ctx.settings.max_active_jobs:
        raise ApiProblem(429, "Quota reached", f"at most {ctx.settings.max_active_jobs} queued or running "
                         "jobs per key; wait for some to finish", kind="quota", headers={"Retry-After": "30"})
    title = spec.get("label") or spec["model"].get("title") or "untitled"
    # The record is written before the message is published: the record is the truth.
    rec = ctx.store.create(JobSpecSchema().dump(spec), title=title[:200], method=spec["method"], owner=owner)
    ctx.publisher.publish(rec.id)
    location = url_for("jobs.get_job", job_id=rec.id)
    return _json(CreatedSchema().dump({"id": rec.id, "state": rec.state, "links": _links(rec.id)}),
                 202, {"Location": location, "Retry-After": "1", "ETag": rec.etag})


def _check_output_cap(spec: dict, cap: int) -> None:
    out = spec["output"]
    n = len(out["times"]) if "times" in out else out["count"]
    if n > cap:
        raise ApiProblem(422, "Invalid job spec", "too many output points", kind="invalid-spec",
                         errors=[{"pointer": "/output", "detail": f"{n} output points; at most {cap} allowed"}])


@bp.post("/spec-checks")
def check_spec():
    """Validate a job spec without submitting it (the submit page checks as you type).
    ---
    post:
      summary: Validate a job spec without submitting it
      operationId: checkSpec
      requestBody:
        required: true
        content: {application/json: {schema: JobSpec}}
      responses:
        200:
          description: valid; facts about the model
          content: {application/json: {schema: SpecCheck}}
        413: PayloadTooLarge
        415: UnsupportedMediaType
        422: UnprocessableContent
    """
    spec = JobSpecSchema().load(read_json_object())
    _check_output_cap(spec, _ctx().settings.max_output_points)
    return _json({"valid": True, "model": describe_model(spec["model"])})


@bp.get("/jobs")
def list_jobs():
    """List your jobs, newest first.
    ---
    get:
      summary: List your jobs, newest first
      operationId: listJobs
      parameters:
        - {name: state, in: query, schema: {type: string, enum: [queued, running, succeeded, failed, cancelled]}}
        - Limit
        - Cursor
      responses:
        200:
          description: a page of jobs; Link rel=next when there is another
          content: {application/json: {schema: JobPage}}
    """
    state = request.args.get("state")
    if state is not None and state not in STATES:
        raise ApiProblem(400, "Bad Request", f"state must be one of {', '.join(STATES)}",
                         errors=[{"pointer": "/query/state", "detail": f"unknown state {state!r}"}])
    limit, cursor = page_args()
    records, next_cursor = _ctx().store.list(current_owner(), state, limit, cursor)
    headers = next_link("jobs.list_jobs", limit, next_cursor, state=state)
    return _json(JobPageSchema().dump({"items": [_view_data(r) for r in records], "next_cursor": next_cursor}),
                 200, headers)


@bp.get("/jobs/<job_id>")
def get_job(job_id: str):
    """Read a job: state, progress, times, digest when done.
    ---
    get:
      summary: Read a job
      operationId: getJob
      parameters:
        - JobId
        - {name: If-None-Match, in: header, description: ETag of an earlier reply, schema: {type: string}}
      responses:
        200:
          description: the job
          headers: {ETag: ETag}
          content: {application/json: {schema: JobView}}
        304: {description: unchanged since the ETag given in If-None-Match}
        404: NotFound
    """
    store = _ctx().store
    inm = request.headers.get("If-None-Match")
    if inm and is_job_id(job_id):
        rev, owner = store.rev_and_owner(job_id)  # one Redis command for an unchanged poll
        if owner != current_owner():
            rev = None
        if rev is not None and make_etag(job_id, rev) in [t.strip() for t in inm.split(",")]:
            return Response(status=304, headers={"ETag": make_etag(job_id, rev)})
    rec = _find(job_id)
    return _json(_view(rec), 200, {"ETag": rec.etag, "Cache-Control": "no-cache"})


@bp.get("/jobs/<job_id>/spec")
def get_spec(job_id: str):
    """The job spec as stored (defaults filled in).
    ---
    get:
      summary: The job spec as stored
      operationId: getSpec
      parameters: [JobId]
      responses:
        200:
          description: the spec
          content: {application/json: {schema: JobSpec}}
        404: NotFound
    """
    _find(job_id)
    return _json(_ctx().store.spec(job_id))


@bp.get("/jobs/<job_id>/result")
def get_result(job_id: str):
    """A job's result as JSON, CSV or NumPy .npz: whole once it has succeeded, partial otherwise.
    ---
    get:
      summary: Read a job's result (partial for a failed, cancelled or running job)
      description: >-
        A succeeded job's result (`partial` false). A failed or cancelled job whose run reached
        the solver keeps what it computed: states up to the last output time reached, with the
        full report, `partial` true and `t_reached`. While a job runs, the worker's latest
        snapshot (rows thinned to about 2000, rewritten every 2 s or so) is served with
        `partial` true and `Cache-Control: no-store`. 409 `result-not-ready` before the first
        snapshot (Retry-After), 409 `no-result` for a job that ended before the solver ran
        (its message says why). A spec with `sensitivity` gets the sensitivities dy/dθ (raw and
        normalised) in every format; with `sensitivity.rank`, a succeeded job's JSON carries
        `sensitivity.ranking` (per output: its value and the parameters sorted by |d ln output /
        d ln θ|, reactions named beside their rate constants), and `table=ranking` serves that
        ranking as CSV (409 `result-not-ready` while the job waits or runs, 404 `no-ranking` when
        the spec asked for none or the run did not succeed).
      operationId: getResult
      parameters:
        - JobId
        - Format
        - name: table
          in: query
          description: >-
            outputs (default): the time series; ranking: the sensitivity ranking, one row per
            output and parameter (CSV only; format defaults to csv)
          schema: {type: string, enum: [outputs, ranking]}
      responses:
        200:
          description: the result, whole or partial
          content:
            application/json: {schema: Result}
            text/csv: {schema: {type: string}}
            application/x-npz: {schema: {type: string, format: binary}}
        404: NotFound
        406: NotAcceptable
        409: Conflict
    """
    rec = _find(job_id)
    table = request.args.get("table", "outputs")
    if table not in ("outputs", "ranking"):
        raise ApiProblem(400, "Bad Request", "table must be 'outputs' or 'ranking'",
                         errors=[{"pointer": "/query/table", "detail": f"unknown table {table[:40]!r}"}])
    if table == "ranking":
        return _ranking_table(job_id, rec)
    fmt = results.negotiate(request.args.get("format"), request.accept_mimetypes)
    if fmt is None:
        raise ApiProblem(406, "Not Acceptable", "results come as json, csv or npz (format= or Accept)")
    store = _ctx().store
    override = {}  # outcome and message of the record, over a snapshot's
    headers = {"ETag": rec.etag, "Cache-Control": "private, max-age=3600", "Vary": "Accept"}
    if rec.state == "queued":
        blob = None
    elif rec.state == "running":
        blob = _live(store, rec, current_attempt=True)
        headers = {"Cache-Control": "no-store", "Vary": "Accept"}
    else:
        blob = store.result_blob(job_id)
        if blob is None and rec.state != "succeeded":
            # a run that ended without a finish of its own (its worker was lost): its last
            # snapshot, if there is one, is what it computed
            blob = _live(store, rec, current_attempt=False)
            override = {"outcome": rec.outcome, "message": rec.message}
    if blob is None:
        if rec.state in ("queued", "running"):
            raise ApiProblem(409, "Result not ready",
                             f"the job is {rec.state}; a partial result appears within a few seconds "
                             "of the start of its run", kind="result-not-ready", state=rec.state,
                             headers={"Retry-After": "1"})
        if rec.state == "succeeded":
            raise ApiProblem(404, "Not Found", "the result has expired", kind="result-expired")
        raise ApiProblem(409, "No result",
                         f"the job {rec.state} before its run produced anything: {rec.message or rec.outcome}",
                         kind="no-result", state=rec.state, outcome=rec.outcome)
    if fmt == "csv":
        headers["Content-Disposition"] = f'attachment; filename="{job_id}.csv"'
        return Response(results.as_csv(blob, **override), mimetype="text/csv", headers=headers)
    if fmt == "npz":
        headers["Content-Disposition"] = f'attachment; filename="{job_id}.npz"'
        return Response(results.as_npz(blob, **override), mimetype="application/x-npz", headers=headers)
    return _json(results.as_json(job_id, blob, rec.state, **override), 200, headers)


def _ranking_table(job_id: str, rec: JobRecord) -> Response:
    """The sensitivity ranking of a finished job as CSV (the JSON result carries it too)."""
    fmt = request.args.get("format", "csv")
    if fmt != "csv":
        raise ApiProblem(406, "Not Acceptable", "the ranking table comes as csv; the JSON result carries "
                                                "the same ranking in sensitivity.ranking")
    if rec.state in ("queued", "running"):
        raise ApiProblem(409, "Result not ready", f"the job is {rec.state}; its ranking comes with its result",
                         kind="result-not-ready", state=rec.state, headers={"Retry-After": "1"})
    blob = _ctx().store.result_blob(job_id) if rec.state == "succeeded" else None
    if blob is None and rec.state == "succeeded":
        raise ApiProblem(404, "Not Found", "the result has expired", kind="result-expired")
    if blob is None or not results.has_ranking(blob):
        raise ApiProblem(404, "Not Found", "this job has no sensitivity ranking: its spec names no outputs in "
                                           "sensitivity.rank, or its run did not succeed",
                         kind="no-ranking", state=rec.state)
    return Response(results.ranking_csv(blob), mimetype="text/csv",
                    headers={"ETag": rec.etag, "Cache-Control": "private, max-age=3600",
                             "Content-Disposition": f'attachment; filename="{job_id}-ranking.csv"'})


def _live(store, rec: JobRecord, current_attempt: bool) -> bytes | None:
    """The running attempt's latest snapshot (``current_attempt``: only if written by the
    attempt that runs now, not by one whose worker was lost before)."""
    blob = store.live_blob(rec.id)
    if blob is None or not current_attempt:
        return blob
    meta, _ = results.decode(blob)
    return blob if meta.get("attempt") == rec.attempt else None


@bp.post("/jobs/<job_id>/cancel")
def cancel_job(job_id: str):
    """Cancel a job: a queued job never starts, a running one stops at its next check.
    ---
    post:
      summary: Cancel a job
      operationId: cancelJob
      parameters: [JobId]
      responses:
        202:
          description: cancellation recorded
          headers: {ETag: ETag}
          content: {application/json: {schema: JobView}}
        404: NotFound
        409: Conflict
    """
    _find(job_id)
    outcome = _ctx().store.cancel(job_id)
    rec = _find(job_id)
    if outcome in ("succeeded", "failed"):
        raise ApiProblem(409, "Already finished", f"the job already {outcome}", kind="already-finished",
                         state=outcome)
    return _json(_view(rec), 202, {"ETag": rec.etag})
