"""gunicorn's logger, switchable to JSON lines (STIFFLANE_LOG_FORMAT=json; see jobs/logs.py).

``stifflane api`` starts gunicorn with ``--logger-class service.access_log.Logger``. In text
mode it is gunicorn's own logger, unchanged. In JSON mode gunicorn's error lines, the app's
own lines (root logger) and one line per request are JSON objects; a request line has
``method``, ``path`` (never the query string: it may hold what should not be logged),
``status``, ``bytes``, ``duration_ms``, ``remote`` and, when the request is about one,
``job_id`` or ``batch_id`` (from the path, or from the Location of a 202 that created it).
"""
from __future__ import annotations

import logging
import re

from gunicorn import glogging

from jobs import logs

_ABOUT = re.compile(r"^/v1/(jobs|batches)/([0-9a-f]{28})(?:/|$)")


def request_fields(method: str, path: str, status, sent, micros: int, remote: str,
                   location: str | None = None) -> dict:
    """The fields of one request line (also used by the tests)."""
    fields = {"message": f"{method} {path} {status}", "method": method, "path": path,
              "status": int(str(status).split()[0]), "bytes": sent or 0,
              "duration_ms": round(micros / 1000, 3), "remote": remote}
    match = _ABOUT.match(path) or (_ABOUT.match(location) if location else None)
    if match:
        fields["job_id" if match.group(1) == "jobs" else "batch_id"] = match.group(2)
    return fields


class Logger(glogging.Logger):
    def setup(self, cfg):
        super().setup(cfg)
        if logs.log_format() == "json":
            for log in (self.error_log, self.access_log):
                for handler in log.handlers:
                    handler.setFormatter(logs.JsonFormatter())
            logs.configure_root()  # the app's own lines; service/app.py's basicConfig then adds none

    def access(self, resp, req, environ, request_time):
        if logs.log_format() != "json":
            return super().access(resp, req, environ, request_time)
        if getattr(self, "access_log_enabled", True) is False:  # a property since gunicorn 23
            return
        location = dict((k.lower(), v) for k, v in resp.headers).get("location")
        micros = request_time.seconds * 1_000_000 + request_time.microseconds
        fields = request_fields(environ.get("REQUEST_METHOD", "-"), environ.get("PATH_INFO", "-"),
                                resp.status, getattr(resp, "sent", None), micros,
                                environ.get("REMOTE_ADDR", "-"), location)
        self.access_log.log(logging.INFO, fields)
