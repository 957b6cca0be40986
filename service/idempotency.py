"""Idempotency-Key on resource creation (IETF draft semantics), for every POST that creates.

A retry with the same key and body returns the first reply; the same key with another
body is 422; a retry while the first request is still running is 409. Keys are per owner
and kept 24 h (jobs/guards.py).
"""
from __future__ import annotations

from typing import Callable

from flask import Response, current_app, request

from jobs import guards
from service.auth import current_owner
from service.problems import ApiProblem

REPLAYED_HEADERS = ("Location", "Retry-After", "ETag")


def idempotent(create: Callable[[], Response]) -> Response:
    """Run ``create`` once per (owner, Idempotency-Key); replay its reply on retries."""
    key = request.headers.get("Idempotency-Key")
    if key is None:
        return create()
    if not (1 <= len(key) <= 200 and key.isascii() and key.isprintable()):
        raise ApiProblem(400, "Bad Idempotency-Key", "use 1-200 printable ASCII characters (a UUID is ideal)")
    store, owner = current_app.extensions["stifflane"].store, current_owner()
    r, keys = store.r, store.keys
    # The fingerprint covers the path too: one key cannot create a job and then a batch.
    print_ = guards.fingerprint(request.path.encode() + b"\n" + request.get_data())
    status, reply = guards.idempotency_begin(r, keys, owner, key, print_)
    if status == "mismatch":
        raise ApiProblem(422, "Idempotency-Key reused", "this Idempotency-Key was used with a different "
                         "body; use a new key for a new request", kind="idempotency-mismatch")
    if status == "in_flight":
        raise ApiProblem(409, "Request in progress", "the first request with this Idempotency-Key is "
                         "still being processed; retry shortly", kind="idempotency-in-flight",
                         headers={"Retry-After": "1"})
    if status == "replay":
        return Response(reply.body, status=reply.status, mimetype="application/json",
                        headers={**reply.headers, "Idempotent-Replayed": "true"})
    try:
        resp = create()
    except Exception:
        guards.idempotency_abandon(r, keys, owner, key)
        raise
    guards.idempotency_finish(r, keys, owner, key, guards.IdempotentReply(
        resp.status_code, resp.get_data(as_text=True),
        {k: v for k, v in resp.headers.items() if k in REPLAYED_HEADERS}))
    return resp
