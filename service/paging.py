"""Cursor pagination shared by every list endpoint: query arguments in, Link header out."""
from __future__ import annotations

from flask import request, url_for

from jobs.keys import is_job_id
from service.problems import ApiProblem

MAX_LIMIT = 200


def page_args() -> tuple[int, str | None]:
    """``limit`` (1-200, default 50) and ``cursor`` (the last id of the previous page)."""
    try:
        limit = int(request.args.get("limit", 50))
        if not 1 <= limit <= MAX_LIMIT:
            raise ValueError
    except ValueError:
        raise ApiProblem(400, "Bad Request", f"limit must be an integer from 1 to {MAX_LIMIT}",
                         errors=[{"pointer": "/query/limit", "detail": f"integer from 1 to {MAX_LIMIT}"}])
    cursor = request.args.get("cursor")
    if cursor is not None and not is_job_id(cursor):
        raise ApiProblem(400, "Bad Request", "cursor must be a value from a previous page's Link header",
                         errors=[{"pointer": "/query/cursor", "detail": "not a cursor"}])
    return limit, cursor


def next_link(endpoint: str, limit: int, next_cursor: str | None, **filters) -> dict:
    """The RFC 8288 ``Link: <...>; rel="next"`` header, when there is a next page."""
    if not next_cursor:
        return {}
    args = {"limit": limit, "cursor": next_cursor, **{k: v for k, v in filters.items() if v is not None}}
    return {"Link": f'<{url_for(endpoint, **args)}>; rel="next"'}
