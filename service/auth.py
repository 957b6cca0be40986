"""API-key authentication, per-owner rate limits, and the request's principal.

Keys travel in ``Authorization: Bearer <key>``, never in the URL. Health, the
OpenAPI document and the dashboard's static files are public; everything else
under /v1 needs a key (unless the server runs with STIFFLANE_AUTH_MODE=off,
where every request acts as the single owner "local").
"""
from __future__ import annotations

from flask import Flask, current_app, g, request

from jobs import accounts, guards
from service.problems import ApiProblem

PUBLIC_PATHS = ("/v1/health", "/v1/openapi.json")
LOCAL = accounts.Principal(owner="local", role="admin", key_id="-")
CHALLENGE = 'Bearer realm="stifflane"'


def current_principal() -> accounts.Principal:
    return g.principal


def current_owner() -> str:
    return g.principal.owner


def _unauthorized(detail: str) -> ApiProblem:
    return ApiProblem(401, "Unauthorized", detail, headers={"WWW-Authenticate": CHALLENGE},
                      kind="unauthorized")


def _authenticate() -> None:
    if not request.path.startswith("/v1/") or request.path in PUBLIC_PATHS:
        return
    ctx = current_app.extensions["stifflane"]
    if any(name in request.args for name in ("key", "api_key", "apikey", "token", "access_token")):
        raise ApiProblem(400, "Key in URL", "send the API key in the Authorization header, never in "
                         "the URL (URLs end up in logs); revoke a key that was sent this way",
                         kind="key-in-url")
    if ctx.settings.auth_mode == "off":
        g.principal = LOCAL
    else:
        header = request.headers.get("Authorization", "")
        scheme, _, key = header.partition(" ")
        if scheme.lower() != "bearer" or not key.strip():
            raise _unauthorized("send an API key as 'Authorization: Bearer <key>'")
        principal = accounts.authenticate(ctx.store.r, ctx.store.keys, key.strip())
        if principal is None:
            raise _unauthorized("the API key is not valid (unknown or revoked)")
        g.principal = principal
    state = guards.hit_rate(ctx.store.r, ctx.store.keys, g.principal.owner,
                            ctx.settings.rate_limit, ctx.settings.rate_window_seconds)
    g.rate = state
    if not state.allowed:
        raise ApiProblem(429, "Too Many Requests",
                         f"more than {state.limit} requests in {ctx.settings.rate_window_seconds} s; "
                         f"retry in {state.reset_seconds} s", kind="rate-limited",
                         headers={"Retry-After": str(state.reset_seconds), **_rate_headers(state)})


def _rate_headers(state: guards.RateState) -> dict:
    return {"RateLimit-Limit": str(state.limit), "RateLimit-Remaining": str(state.remaining),
            "RateLimit-Reset": str(state.reset_seconds)}


def install(app: Flask) -> None:
    app.before_request(_authenticate)

    @app.after_request
    def _add_rate_headers(resp):
        state = g.get("rate")
        if state is not None:
            for k, v in _rate_headers(state).items():
                resp.headers.setdefault(k, v)
        return resp
