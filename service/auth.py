"""API-key authentication, rate limits, and the request's principal.

Keys travel in ``Authorization: Bearer <key>``, never in the URL: any query parameter
that looks like a credential is refused on every path. Health, the OpenAPI document and
the dashboard's pages and static files are public; everything else under /v1 needs a key
(unless the server runs with STIFFLANE_AUTH_MODE=off, where every request acts as the
single owner "local"). Requests with a valid key count in their owner's rate window;
requests without one (public /v1 paths, missing or refused keys) in their client
address's window, and past it those get 429.
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


# Query parameters whose names look like a credential (compared without case, "-", "_" or ".").
CREDENTIAL_WORDS = ("key", "token", "auth", "bearer", "secret", "passw", "pwd", "credential",
                    "session", "jwt", "signature")


def credential_parameters() -> list[str]:
    """Names of query parameters that carry, or look like they carry, a credential."""
    found = []
    for name, value in request.args.items(multi=True):
        plain = "".join(c for c in name.lower() if c.isalnum())
        if any(word in plain for word in CREDENTIAL_WORDS) or value.startswith("slk_"):
            found.append(name)
    return found


def client_address() -> str:
    """The client's address. Behind our own front (nginx on a unix socket, see cli/front.py)
    the socket has no peer address and the front sets X-Forwarded-For to the address it saw,
    replacing whatever the client sent; over TCP the peer address is the client and any
    X-Forwarded-For is the client's own claim, so it is ignored."""
    remote = request.remote_addr
    if not remote:
        forwarded = request.headers.get("X-Forwarded-For", "").split(",")[-1].strip()
        return forwarded or "unix"
    return remote


def _refuse_keys_in_url() -> None:
    names = credential_parameters()
    if names:
        raise ApiProblem(400, "Key in URL", f"query parameter {names[0]!r} looks like a credential: send "
                         "the API key in the Authorization header, never in the URL (URLs end up in "
                         "logs and browser history); revoke a key that was sent this way",
                         kind="key-in-url")


def _too_many(state: guards.RateState, window: int, who: str) -> ApiProblem:
    return ApiProblem(429, "Too Many Requests",
                      f"more than {state.limit} requests{who} in {window} s; retry in "
                      f"{state.reset_seconds} s", kind="rate-limited",
                      headers={"Retry-After": str(state.reset_seconds), **_rate_headers(state)})


def _authenticate() -> None:
    if request.args:  # every path: pages and public endpoints too
        _refuse_keys_in_url()
    if not request.path.startswith("/v1/"):
        return
    ctx = current_app.extensions["stifflane"]
    s = ctx.settings
    if s.auth_mode == "off":
        if request.path in PUBLIC_PATHS:
            return
        g.principal = LOCAL
    else:
        # Requests without a valid key (public paths, missing or refused keys) count in the
        # client address's window, and past it they get 429: keys cannot be tried at speed,
        # and a request with a valid key costs nothing more.
        address = client_address()
        if request.path in PUBLIC_PATHS:
            g.principal = _optional_principal(ctx)
            if g.principal is None:
                g.rate = guards.hit_address(ctx.store.r, ctx.store.keys, address, s.address_rate_limit,
                                            s.rate_window_seconds)
                if not g.rate.allowed:
                    raise _too_many(g.rate, s.rate_window_seconds, " without a valid key from this address")
            return
        header = request.headers.get("Authorization", "")
        scheme, _, key = header.partition(" ")
        principal = None
        if scheme.lower() == "bearer" and key.strip():
            principal = accounts.authenticate(ctx.store.r, ctx.store.keys, key.strip())
        if principal is None:
            state = guards.hit_address(ctx.store.r, ctx.store.keys, address, s.address_rate_limit,
                                       s.rate_window_seconds)
            if not state.allowed:
                raise _too_many(state, s.rate_window_seconds, " without a valid key from this address")
            if scheme.lower() != "bearer" or not key.strip():
                raise _unauthorized("send an API key as 'Authorization: Bearer <key>'")
            raise _unauthorized("the API key is not valid (unknown or revoked)")
        g.principal = principal
    state = guards.hit_rate(ctx.store.r, ctx.store.keys, g.principal.owner, s.rate_limit,
                            s.rate_window_seconds)
    g.rate = state
    if not state.allowed:
        raise _too_many(state, s.rate_window_seconds, "")


def _optional_principal(ctx) -> accounts.Principal | None:
    """The principal of a public request that carries a valid key (health shows it more)."""
    scheme, _, key = request.headers.get("Authorization", "").partition(" ")
    if scheme.lower() != "bearer" or not key.strip():
        return None
    return accounts.authenticate(ctx.store.r, ctx.store.keys, key.strip())


def is_trusted() -> bool:
    """True for a request made with a valid key, or on a server without keys."""
    ctx = current_app.extensions["stifflane"]
    if ctx.settings.auth_mode == "off":
        return True
    return g.get("principal") is not None


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
