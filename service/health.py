"""/v1/health and /v1/openapi.json."""
from __future__ import annotations

import time

from flask import Blueprint, Response, current_app, json
from redis.exceptions import RedisError

from schemas.views import HealthSchema
from service.auth import is_trusted

bp = Blueprint("health", __name__, url_prefix="/v1")
STALL_SECONDS = 120


@bp.get("/health")
def health():
    """Redis, workers and queue depths.
    ---
    get:
      summary: Redis, workers and queue depths
      operationId: health
      security: []
      responses:
        200:
          description: healthy
          content: {application/json: {schema: Health}}
        503:
          description: degraded (Redis unreachable)
          headers: {Retry-After: RetryAfter}
          content: {application/json: {schema: Health}}
    """
    ctx = current_app.extensions["stifflane"]
    body = {"status": "ok", "redis": {}, "workers": [], "queues": {}}  # workers: with a key only
    status = 200
    try:
        started = time.perf_counter()
        ctx.store.r.ping()
        body["redis"] = {"reachable": True, "ping_ms": round(1000 * (time.perf_counter() - started), 2)}
        workers = ctx.store.workers()
        body["worker_count"] = len(workers)
        if is_trusted():  # host names and process ids only for a caller with a key
            body["workers"] = workers
        else:
            del body["workers"]
        body["queues"] = {"broker:" + ctx.settings.interactive_queue: ctx.store.r.llen(ctx.settings.interactive_queue),
                          **{f"jobs:{k}": v for k, v in ctx.store.queue_counts().items()
                             if k in ("queued", "running")}}
        waited = ctx.store.oldest_queued_age()
        body["queues"]["oldest_queued_seconds"] = int(waited or 0)
        if not workers:
            body["status"] = "degraded"
            body["detail"] = "no worker has reported in the last 30 s; queued jobs will wait"
        elif waited is not None and waited > STALL_SECONDS and body["queues"]["jobs:running"] == 0:
            # Workers alive but nothing running while jobs wait: a consumer that stopped
            # consuming (e.g. after a broker reconnect). Restart the workers.
            body["status"] = "degraded"
            body["detail"] = (f"workers report in but none is running a job while the oldest queued job "
                              f"has waited {int(waited)} s; restart the workers")
    except RedisError as e:
        body.update(status="degraded", redis={"reachable": False, "error": str(e)[:200]})
        status = 503
    resp = Response(json.dumps(HealthSchema().dump(body)),
                    status=status, mimetype="application/json")
    if status == 503:
        resp.headers["Retry-After"] = "2"
    return resp


@bp.get("/openapi.json")
def openapi():
    """This document (service/openapi_doc.py generates it from the views).
    ---
    get:
      summary: The OpenAPI document
      operationId: openapi
      security: []
      responses:
        200:
          description: OpenAPI 3.1
          content: {application/json: {schema: {type: object}}}
    """
    from service.openapi_doc import document_text

    return Response(document_text(current_app), mimetype="application/json")
