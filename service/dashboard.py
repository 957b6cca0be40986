"""The dashboard: static pages served by the API, polling /v1 with ETags."""
from __future__ import annotations

from flask import Blueprint, send_from_directory, current_app
import os

bp = Blueprint("dashboard", __name__)
_STATIC = os.path.join(os.path.dirname(__file__), "static")


@bp.get("/")
def index():
    return send_from_directory(_STATIC, "index.html")


@bp.get("/ui/<path:name>")
def asset(name: str):
    return send_from_directory(_STATIC, name)
