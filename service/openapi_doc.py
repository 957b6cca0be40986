"""The OpenAPI 3.1 document served at /v1/openapi.json, generated from the running app.

Each view documents itself: the YAML after ``---`` in its docstring is its operation
(apispec's FlaskPlugin reads it and finds the view's URL rule), with components named by
string (``schema: JobSpec``, responses such as ``404: NotFound``) from schemas/openapi.py.
What every route can answer is added here once rather than in every docstring: 400 (a query
parameter the operation does not take, see :func:`install`), and on every secured route 401,
429 (the key's rate window) and 503 (Redis unreachable, service/problems.py). An operation
with ``security: []`` is public.

The document is also the list of query parameters each operation takes: :func:`install`
refuses any other (400 naming it), so a misspelt ``?limt=5`` is not silently ignored, and a
parameter given twice (``?limit=5&limit=500``: which one holds?) is refused too.
"""
from __future__ import annotations

import json

from apispec_webframeworks.flask import FlaskPlugin
from flask import Flask, request

from schemas.openapi import finish, new_spec, problem_ref

AUTH_RESPONSES = (401, 429, 503)
METHODS = ("get", "put", "post", "delete", "patch")


def build(app: Flask, version: str) -> dict:
    """The document for ``app``: every view whose docstring has an operation."""
    spec = new_spec(version, [FlaskPlugin()])
    adjusters = []
    for rule in sorted(app.url_map.iter_rules(), key=lambda r: (r.rule, r.endpoint)):
        view = app.view_functions.get(rule.endpoint)
        if view is None or "\n---" not in "\n" + "\n".join(
                line.strip() for line in (view.__doc__ or "").splitlines()):
            continue
        spec.path(view=view, app=app)
        if hasattr(view, "openapi_adjust"):  # a view whose operation depends on the settings
            adjusters.append(view.openapi_adjust)
    doc = finish(spec.to_dict())
    for adjust in adjusters:
        adjust(app, doc)
    for ops in doc["paths"].values():
        for method, op in ops.items():
            if method not in METHODS:
                continue
            responses = {str(code): r for code, r in op.get("responses", {}).items()}
            responses.setdefault("400", problem_ref(400))
            if op.get("security") != []:
                for status in AUTH_RESPONSES:
                    responses.setdefault(str(status), problem_ref(status))
            op["responses"] = dict(sorted(responses.items()))
    return doc


def document_text(app: Flask) -> str:
    """The document as JSON text, built once per app."""
    cached = app.extensions.get("stifflane.openapi")
    if cached is None:
        from service.app import VERSION

        cached = app.extensions["stifflane.openapi"] = json.dumps(build(app, VERSION))
    return cached


def _query_parameters(app: Flask) -> dict[tuple[str, str], frozenset]:
    """(OpenAPI path, METHOD) -> the query parameter names the document gives it."""
    cached = app.extensions.get("stifflane.openapi.query")
    if cached is None:
        doc = json.loads(document_text(app))
        named = doc["components"]["parameters"]
        cached = {}
        for path, ops in doc["paths"].items():
            for method, op in ops.items():
                if method not in METHODS:
                    continue
                params = [named[p["$ref"].rsplit("/", 1)[1]] if "$ref" in p else p
                          for p in op.get("parameters", [])]
                cached[(path, method.upper())] = frozenset(p["name"] for p in params if p["in"] == "query")
        app.extensions["stifflane.openapi.query"] = cached
    return cached


def install(app: Flask) -> None:
    """Refuse query parameters an operation does not document (after authentication)."""
    from service.problems import ApiProblem

    @app.before_request
    def _documented_query_only():
        if not request.query_string or request.url_rule is None:
            return
        method = "GET" if request.method == "HEAD" else request.method
        known = _query_parameters(app).get((FlaskPlugin.flaskpath2openapi(request.url_rule.rule), method))
        if known is None:
            return
        from urllib.parse import parse_qsl
        raw = parse_qsl(request.query_string.decode("latin-1"), keep_blank_values=True)
        names = set(request.args) | {name for name, _ in raw}  # blank names count too
        unknown = sorted(names - known)
        repeated = sorted({name for name, _ in raw if name in known and sum(n == name for n, _ in raw) > 1})
        if repeated and not unknown:  # every documented parameter is a single value
            raise ApiProblem(400, "Bad Request", f"query parameter(s) {', '.join(map(repr, repeated))} "
                             "given more than once; give each once",
                             errors=[{"pointer": f"/query/{name}", "detail": "given more than once"}
                                     for name in repeated])
        if unknown:
            takes = ", ".join(sorted(known)) or "none"
            raise ApiProblem(400, "Bad Request", f"unknown query parameter(s) {', '.join(map(repr, unknown))}; "
                             f"this operation takes: {takes}",
                             errors=[{"pointer": f"/query/{name}", "detail": "not a parameter of this operation"}
                                     for name in unknown])
