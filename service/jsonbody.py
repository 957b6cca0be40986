"""Strict JSON request bodies: media type, size, no NaN/Infinity, no duplicate keys."""
from __future__ import annotations

import json

from flask import request

from service.problems import ApiProblem


def _no_constants(token: str):
    raise ValueError(f"{token} is not valid JSON (numbers must be finite)")


def _no_duplicates(pairs):
    out = {}
    for key, value in pairs:
        if key in out:
            raise ValueError(f"duplicate key {key!r}")
        out[key] = value
    return out


def read_json_object() -> dict:
    mimetype = request.mimetype or ""
    if mimetype != "application/json" and not mimetype.endswith("+json"):
        raise ApiProblem(415, "Unsupported Media Type",
                         f"send the body as application/json (got {mimetype or 'no Content-Type'})")
    raw = request.get_data()  # MAX_CONTENT_LENGTH is enforced here (413); cached for fingerprints
    try:
        text = raw.decode("utf-8")
        body = json.loads(text, parse_constant=_no_constants, object_pairs_hook=_no_duplicates)
    except UnicodeDecodeError:
        raise ApiProblem(400, "Malformed JSON", "the body is not UTF-8 text", kind="malformed-json")
    except json.JSONDecodeError as e:
        raise ApiProblem(400, "Malformed JSON", f"line {e.lineno} column {e.colno}: {e.msg}",
                         kind="malformed-json")
    except (ValueError, RecursionError) as e:
        raise ApiProblem(400, "Malformed JSON", str(e)[:300], kind="malformed-json")
    if not isinstance(body, dict):
        raise ApiProblem(422, "Invalid job spec", "the body must be a JSON object", kind="invalid-spec",
                         errors=[{"pointer": "/", "detail": "must be a JSON object"}])
    return body
