"""The dashboard: pages served by the API (templates sharing one layout); the pages'
scripts call /v1 themselves.

Pages: ``/`` (run board), ``/jobs/<id>`` (one job), ``/submit`` (new run),
``/batches`` and ``/batches/<id>`` (sweeps). Assets under ``/ui/``; the example
specs under ``/ui/examples/<name>.json``. Everything works offline: the charting
library is vendored in static/vendor/.
"""
from __future__ import annotations

import os
from pathlib import Path

from flask import Blueprint, abort, make_response, render_template, send_from_directory

bp = Blueprint("dashboard", __name__)
_STATIC = os.path.join(os.path.dirname(__file__), "static")
_EXAMPLES = Path(__file__).resolve().parent.parent / "examples" / "jobs"
# Pages load scripts, styles and images from this server only; no inline script or style
# attribute runs (the scripts set styles through the style object, see static/api.js), no
# other site may frame them (frame-ancestors, and X-Frame-Options for older browsers).
PAGE_POLICY = ("default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self' data: blob:; "
               "connect-src 'self'; font-src 'self'; manifest-src 'self'; base-uri 'none'; "
               "form-action 'self'; frame-ancestors 'none'")
# Every other answer (JSON, results, assets) is never a document: nothing may run in it.
DEFAULT_POLICY = "default-src 'none'; frame-ancestors 'none'"
_PAGE_HEADERS = {"Cache-Control": "no-cache", "X-Content-Type-Options": "nosniff",
                 "Referrer-Policy": "same-origin", "Content-Security-Policy": PAGE_POLICY,
                 "X-Frame-Options": "DENY"}


@bp.after_app_request
def _frame_and_script_policy(resp):
    resp.headers.setdefault("Content-Security-Policy", DEFAULT_POLICY)
    resp.headers.setdefault("X-Frame-Options", "DENY")
    resp.headers.setdefault("X-Content-Type-Options", "nosniff")
    return resp


def _page(name: str):
    """A page: service/templates/<name>, laid out by base.html (header, navigation, caution)."""
    resp = make_response(render_template(name))
    resp.headers.update(_PAGE_HEADERS)
    return resp


@bp.get("/")
def index():
    return _page("index.html")


@bp.get("/jobs/<job_id>")
def job_page(job_id: str):
    return _page("job.html")


@bp.get("/submit")
def submit_page():
    return _page("submit.html")


@bp.get("/batches")
def batches_page():
    return _page("batches.html")


@bp.get("/batches/<batch_id>")
def batch_page(batch_id: str):
    return _page("batch.html")


@bp.get("/ui/examples/<name>.json")
def example(name: str):
    """An example job spec from examples/jobs/ (the invented demo scenario)."""
    if not _EXAMPLES.is_dir():
        abort(404)
    return send_from_directory(_EXAMPLES, f"{name}.json", mimetype="application/json")


@bp.get("/ui/<path:name>")
def asset(name: str):
    resp = send_from_directory(_STATIC, name)
    resp.headers["X-Content-Type-Options"] = "nosniff"
    return resp
