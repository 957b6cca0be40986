"""Structured logs: one JSON object per line, carrying the job (or batch) a line is about.

``STIFFLANE_LOG_FORMAT=json`` switches the API (service/access_log.py, gunicorn's request and
error lines and the app's own) and the worker (worker/logs.py, Celery's lines and ours) to
JSON; ``text`` (the default) keeps the usual lines. Each object has ``ts`` (RFC 3339 UTC),
``level``, ``logger``, ``message``, ``process``, and, where known, ``job_id``, ``batch_id`` and
``chunk`` (set for the duration of a task by :func:`job_scope`, or given as ``extra=``), an
``exception`` text, and for request lines the request's fields (service/access_log.py).
"""
from __future__ import annotations

import contextlib
import contextvars
import json
import logging
import os
import sys
from datetime import datetime, timezone

FORMATS = ("text", "json")
CONTEXT_FIELDS = ("job_id", "batch_id", "chunk")
_scope: contextvars.ContextVar[dict] = contextvars.ContextVar("stifflane_log_scope", default={})


def log_format() -> str:
    value = os.environ.get("STIFFLANE_LOG_FORMAT", "text").strip().lower() or "text"
    if value not in FORMATS:
        print(f"STIFFLANE_LOG_FORMAT={value!r} is not one of {', '.join(FORMATS)}; using text", file=sys.stderr)
        return "text"
    return value


@contextlib.contextmanager
def job_scope(**ids):
    """Every line logged in this block (same thread or task) carries ``ids`` (job_id=...)."""
    token = _scope.set({k: v for k, v in ids.items() if v is not None})
    try:
        yield
    finally:
        _scope.reset(token)


def set_scope(**ids) -> contextvars.Token:
    return _scope.set({k: v for k, v in ids.items() if v is not None})


def reset_scope(token: contextvars.Token | None = None) -> None:
    try:
        if token is not None:
            _scope.reset(token)
            return
    except ValueError:  # a token from another context: clear instead
        pass
    _scope.set({})


class JsonFormatter(logging.Formatter):
    """A log record as one line of JSON. A record whose message is a dict merges its fields in."""

    def format(self, record: logging.LogRecord) -> str:
        out = {"ts": datetime.fromtimestamp(record.created, tz=timezone.utc).isoformat(timespec="milliseconds")
               .replace("+00:00", "Z"),
               "level": record.levelname.lower(), "logger": record.name, "process": record.process}
        if isinstance(record.msg, dict):
            out.update(record.msg)
        else:
            out["message"] = record.getMessage()
        for name in CONTEXT_FIELDS:
            value = getattr(record, name, None)
            if value is None:
                value = _scope.get().get(name)
            if value is not None:
                out[name] = value
        if record.exc_info:
            out["exception"] = self.formatException(record.exc_info)
        elif record.exc_text:
            out["exception"] = record.exc_text
        return json.dumps(out, default=str, ensure_ascii=False)


def use_json(logger: logging.Logger) -> None:
    """Give every handler of ``logger`` the JSON formatter (one stderr handler if it has none)."""
    if not logger.handlers:
        logger.addHandler(logging.StreamHandler(sys.stderr))
    for handler in logger.handlers:
        handler.setFormatter(JsonFormatter())


def configure_root(level: int = logging.INFO) -> None:
    """JSON lines for the root logger when STIFFLANE_LOG_FORMAT=json (no-op otherwise)."""
    if log_format() == "json":
        root = logging.getLogger()
        root.setLevel(min(root.level or level, level))
        use_json(root)
