"""RFC 9457 problem details, and marshmallow errors turned into JSON pointers."""
from __future__ import annotations

import difflib
import json

from marshmallow import Schema, fields

from engine.language.names import one_edit_apart

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
    line = fields.Integer(metadata={"description": "malformed JSON: the line where reading stopped (from 1)"})
    column = fields.Integer(metadata={"description": "malformed JSON: the column there (from 1)"})
    limit_bytes = fields.Integer(metadata={"description": "413: the largest body accepted, in bytes"})


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


def close_names(name, known, n: int = 3) -> list[str]:
    """The known names a mistyped one is probably meant to be (best first): close spellings
    ('tspan' for 'span'), one letter off ('H3' for 'H2'), or the same but for case."""
    if not isinstance(name, str):
        return []
    known = [k for k in known if isinstance(k, str) and k != name]
    close = difflib.get_close_matches(name, known, n=n, cutoff=0.6)
    if not close:
        close = [k for k in known if one_edit_apart(name, k)][:n]
    if not close:
        close = [k for k in known if k.lower() == name.lower()][:n]
    return close


def did_you_mean(name, known) -> str:
    """"; did you mean 'x'?" (or "") to append to a message about an unknown name."""
    close = close_names(name, known)
    return ("; did you mean " + " or ".join(f"'{c}'" for c in close) + "?") if close else ""


# Python's JSON reader says what it expected; these say what is probably wrong, in words.
_JSON_SENTENCES = (
    ("Expecting ',' delimiter", "a comma is missing between two items, or a bracket or brace is not closed"),
    ("Expecting ':' delimiter", "a colon is missing between a key and its value"),
    ("Expecting property name enclosed in double quotes",
     "a key must be a string in double quotes; a comma after the last item is not allowed"),
    ("Expecting value", "a value is missing or is not JSON: strings need double quotes, true, false "
                        "and null are lower case, and a comma after the last item is not allowed"),
    ("Extra data", "there is more text after the end of the JSON value (one object per body)"),
    ("Unterminated string", "a string is not closed with a double quote"),
    ("Invalid control character", "a string holds a raw line break or tab; write it as \\n or \\t"),
    ("Invalid \\uXXXX escape", "a string holds a broken \\u escape (four hex digits are needed)"),
    ("Invalid \\escape", "a string holds a backslash that starts no valid escape (write \\\\ for a backslash)"),
)


def json_error_detail(e: json.JSONDecodeError, source: str = "the body") -> str:
    """A plain sentence for a JSON syntax error, with its line and column and the text there."""
    sentence = next((text for prefix, text in _JSON_SENTENCES if e.msg.startswith(prefix)),
                    "the text is not valid JSON")
    if not e.doc.strip():
        return f"{source} is empty; send a JSON object"
    line = e.doc.splitlines()[e.lineno - 1] if e.lineno - 1 < len(e.doc.splitlines()) else ""
    start = max(0, e.colno - 1 - 30)
    excerpt = line[start:e.colno - 1 + 10].strip()
    near = f" (near: {excerpt[:60]!r})" if excerpt else ""
    return f"{source} is not valid JSON at line {e.lineno}, column {e.colno}{near}: {sentence}"
