"""RFC 9457 problem details, and marshmallow errors turned into JSON pointers."""
from __future__ import annotations

from marshmallow import Schema, fields

PROBLEM_MEDIA_TYPE = "application/problem+json"
TYPE_BASE = "https://stifflane.invalid/problems/"


class InvalidParamSchema(Schema):
    pointer = fields.String(metadata={"description": "RFC 6901 JSON pointer into the request body"})
    detail = fields.String(metadata={"description": "what is wrong and what is allowed"})


class ProblemSchema(Schema):
    type = fields.String()
    title = fields.String()
    status = fields.Integer()
    detail = fields.String()
    instance = fields.String()
    errors = fields.List(fields.Nested(InvalidParamSchema))


def escape_pointer_token(token) -> str:
    return str(token).replace("~", "~0").replace("/", "~1")


def pointers(messages, prefix: str = "") -> list[dict]:
    """Flatten marshmallow's nested error dict into [{pointer, detail}] (sorted)."""
    out: list[dict] = []
    if isinstance(messages, dict):
        for key, sub in messages.items():
            if key == "_schema":
                out.extend(pointers(sub, prefix))
            else:
                out.extend(pointers(sub, f"{prefix}/{escape_pointer_token(key)}"))
    elif isinstance(messages, (list, tuple)):
        for item in messages:
            if isinstance(item, (dict, list, tuple)):
                out.extend(pointers(item, prefix))
            else:
                out.append({"pointer": prefix or "/", "detail": str(item)})
    else:
        out.append({"pointer": prefix or "/", "detail": str(messages)})
    return out


def problem(status: int, title: str, detail: str = "", kind: str | None = None, **extra) -> dict:
    body = {"type": TYPE_BASE + (kind or title.lower().replace(" ", "-")),
            "title": title, "status": status}
    if detail:
        body["detail"] = detail
    body.update(extra)
    return body
