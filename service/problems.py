"""One error shape for every failure: RFC 9457 problem details."""
from __future__ import annotations

import json
import logging

from flask import Flask, Response, request
from marshmallow import ValidationError
from redis.exceptions import RedisError
from werkzeug.exceptions import HTTPException, RequestEntityTooLarge

from schemas.problem import PROBLEM_MEDIA_TYPE, pointers, problem

log = logging.getLogger(__name__)


class ApiProblem(Exception):
    """Raised by views for a specific problem document."""

    def __init__(self, status: int, title: str, detail: str = "", headers: dict | None = None, **extra):
        super().__init__(detail or title)
        self.status, self.title, self.detail = status, title, detail
        self.headers = headers or {}
        self.extra = extra


def too_large(limit: int) -> ApiProblem:
    return ApiProblem(413, "Content Too Large",
                      f"the request body is larger than the limit of {limit} bytes "
                      f"({limit / 1048576:g} MiB); split a large sweep into several batches",
                      kind="body-too-large", limit_bytes=limit)


def problem_response(status: int, title: str, detail: str = "", headers: dict | None = None,
                     **extra) -> Response:
    body = problem(status, title, detail, instance=request.path, **extra)
    resp = Response(json.dumps(body), status=status, mimetype=PROBLEM_MEDIA_TYPE)
    for k, v in (headers or {}).items():
        resp.headers[k] = v
    return resp


def install(app: Flask) -> None:
    @app.errorhandler(ApiProblem)
    def _api_problem(e: ApiProblem):
        return problem_response(e.status, e.title, e.detail, e.headers, **e.extra)

    @app.errorhandler(ValidationError)
    def _invalid(e: ValidationError):
        errors = pointers(e.messages)
        return problem_response(422, "Invalid job spec",
                                f"{len(errors)} problem(s) in the request body; see errors",
                                kind="invalid-spec", errors=errors)

    @app.errorhandler(RequestEntityTooLarge)
    def _too_large(e: RequestEntityTooLarge):
        limit = app.config.get("MAX_CONTENT_LENGTH") or 0
        p = too_large(limit)
        return problem_response(p.status, p.title, p.detail, **p.extra)

    @app.errorhandler(HTTPException)
    def _http(e: HTTPException):
        headers = {}
        if e.code == 405 and getattr(e, "valid_methods", None):
            headers["Allow"] = ", ".join(e.valid_methods)
        return problem_response(e.code or 500, e.name, e.description or "", headers)

    @app.errorhandler(RedisError)
    def _redis_down(e: RedisError):
        log.warning("redis unavailable: %s", e)
        return problem_response(503, "Store unavailable",
                                "the job store (Redis) cannot be reached; retry shortly",
                                {"Retry-After": "2"}, kind="store-unavailable")

    @app.errorhandler(Exception)
    def _unexpected(e: Exception):
        log.exception("unhandled error")
        return problem_response(500, "Internal error", "an unexpected error occurred; it has been logged")
