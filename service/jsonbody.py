"""Strict JSON request bodies: media type, size, no NaN/Infinity, no duplicate keys."""
from __future__ import annotations

import json

from flask import Flask, current_app, request

from schemas.problem import json_error_detail
from service.problems import ApiProblem, too_large


def _no_constants(token: str):
    raise ValueError(f"{token} is not valid JSON (numbers must be finite)")


MAX_NUMBER_DIGITS = 400  # beyond float64's range (309 digits) anyway; CPython refuses 4300


def _integer(token: str):
    digits = len(token.lstrip("-"))
    if digits > MAX_NUMBER_DIGITS:
        raise ValueError(f"a number in the body has {digits} digits; numbers may have at most "
                         f"{MAX_NUMBER_DIGITS} (every number is read as a 64-bit float)")
    return int(token)


def _no_duplicates(pairs):
    out = {}
    for key, value in pairs:
        if key in out:
            raise ValueError(f"the key {key!r} appears twice in one object; give each key once")
        out[key] = value
    return out


def _whole_body_within_limit() -> None:
    """A body without Content-Length (Transfer-Encoding: chunked) over the limit is 413, as a
    sized one is: werkzeug stops reading it at the limit, and what it read must not pass for
    the whole body. Runs before any view reads the body (fingerprints, JSON)."""
    if request.method not in ("POST", "PUT", "PATCH") or request.content_length is not None:
        return
    limit = current_app.config["MAX_CONTENT_LENGTH"]
    raw = request.get_data()  # cached: views read the same bytes
    if limit is not None and len(raw) >= limit and request.environ["wsgi.input"].read(1):
        raise too_large(limit)


def install(app: Flask) -> None:
    app.before_request(_whole_body_within_limit)


def read_json_object() -> dict:
    mimetype = request.mimetype or ""
    if mimetype != "application/json" and not mimetype.endswith("+json"):
        raise ApiProblem(415, "Unsupported Media Type",
                         f"send the body as application/json (got {mimetype or 'no Content-Type'})")
    raw = request.get_data()  # MAX_CONTENT_LENGTH is enforced here (413); cached for fingerprints
    try:
        text = raw.decode("utf-8")
        body = json.loads(text, parse_constant=_no_constants, parse_int=_integer, object_pairs_hook=_no_duplicates)
    except UnicodeDecodeError as e:
        raise ApiProblem(400, "Malformed JSON", f"the body is not UTF-8 text (byte {e.start} cannot be "
                         "read); send JSON as UTF-8", kind="malformed-json")
    except json.JSONDecodeError as e:  # a plain sentence with line and column, not the parser's words
        raise ApiProblem(400, "Malformed JSON", json_error_detail(e), kind="malformed-json",
                         line=e.lineno, column=e.colno)
    except (ValueError, RecursionError) as e:
        raise ApiProblem(400, "Malformed JSON", str(e)[:300], kind="malformed-json")
    if not isinstance(body, dict):
        raise ApiProblem(422, "Invalid job spec", "the body must be a JSON object", kind="invalid-spec",
                         errors=[{"pointer": "/", "detail": "must be a JSON object"}])
    return body
