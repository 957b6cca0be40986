"""The front: Debian's nginx in front of gunicorn, so slow or hostile clients cost nginx a
connection and never hold one of the API's few threads.

nginx reads every request head and body whole before it passes the request on (request
buffering), times out clients that stop sending, refuses bodies over the API's own limit
(413), and answers its own errors (413, 414, 431, 408, 502) as problem+json like the API.
gunicorn listens only on a unix socket in the front's folder (0700), so nothing but the
front (and the stack's own account) can reach it; that is why the API may trust the
X-Forwarded-For header the front sets on requests arriving over that socket
(service/auth.py, ``client_address``). Neither log keeps query strings.

The configuration is generated here into var/front/ (``stifflane up``) or the folder given;
nothing under /etc is read or changed.
"""
from __future__ import annotations

import json
import os
import shutil
import subprocess
import time
from pathlib import Path
from typing import Callable

from cli.main import ROOT, api_command

FRONT_DIR = ROOT / "var" / "front"
INSTALL_HINT = ("the front needs Debian's nginx: install it with 'apt-get install nginx-light' "
                "(as root; 'make run' does this when run as root), or start without a front with "
                "--no-front (slow clients can then stall the API)")

# Timeouts of the front (seconds): a client must send its whole request head within
# HEADER_SECONDS and keep sending its body (no pause longer than BODY_SECONDS); a client
# that does not read our answer for SEND_SECONDS is dropped.
HEADER_SECONDS = 10
BODY_SECONDS = 10
SEND_SECONDS = 30
CONNECTIONS_PER_ADDRESS = 64
# The request line and each header must fit one 4 KiB buffer (414 / 431 beyond); gunicorn
# behind the front accepts twice that, so these answers always come from the front.
HEADER_BUFFER = "4k"
HEADER_BUFFERS = 4

Spawn = Callable[[str, list], subprocess.Popen]


def nginx_binary() -> str | None:
    return shutil.which("nginx") or next(
        (p for p in ("/usr/sbin/nginx", "/usr/local/sbin/nginx") if os.access(p, os.X_OK)), None)


def socket_path(front_dir: Path) -> Path:
    return front_dir / "api.sock"


def _problem(status: int, title: str, detail: str, kind: str, **extra) -> str:
    body = {"type": f"https://stifflane.invalid/problems/{kind}", "title": title, "status": status,
            "detail": detail, **extra}
    return json.dumps(body).replace("\\", "\\\\").replace("'", "\\'")


def _error_pages(max_body_bytes: int) -> list[tuple[int, int, str]]:
    """(nginx code, status sent, problem text) for the errors the front answers itself."""
    return [
        (413, 413, _problem(413, "Content Too Large",
                            f"the request body is larger than the limit of {max_body_bytes} bytes "
                            f"({max_body_bytes / 1048576:g} MiB); split a large sweep into several "
                            "batches", "body-too-large", limit_bytes=max_body_bytes)),
        (414, 414, _problem(414, "URI Too Long",
                            "the request line is longer than 4096 bytes; send parameters in the body",
                            "uri-too-long")),
        (494, 431, _problem(431, "Request Header Fields Too Large",
                            "a request header is longer than 4096 bytes, or all of them together "
                            "longer than 16 KiB", "headers-too-large")),
        (400, 400, _problem(400, "Bad Request", "the request is not valid HTTP/1.1", "bad-request")),
        (408, 408, _problem(408, "Request Timeout",
                            f"the request was not sent in time (head within {HEADER_SECONDS} s, no "
                            f"pause over {BODY_SECONDS} s in the body)", "request-timeout")),
        (404, 404, _problem(404, "Not Found", "no such path", "not-found")),
        (500, 500, _problem(500, "Internal error", "the front failed; see var/front/error.log",
                            "internal-error")),
        (429, 429, _problem(429, "Too Many Requests",
                            f"more than {CONNECTIONS_PER_ADDRESS} open connections from this address; "
                            "close some and retry", "too-many-connections")),
        (502, 503, _problem(503, "API unavailable",
                            "the API behind the front is not answering; retry shortly", "api-unavailable")),
        (504, 503, _problem(503, "API unavailable",
                            "the API behind the front did not answer in time; retry shortly",
                            "api-unavailable")),
    ]


def config_text(host: str, port: int, front_dir: Path, max_body_bytes: int,
                user: str | None = None) -> str:
    """The nginx configuration of the front (every path inside ``front_dir``)."""
    d = front_dir.resolve()
    pages = _error_pages(max_body_bytes)
    listen = f"[{host}]:{port}" if ":" in host else f"{host}:{port}"
    # Pages by URI, not by named location: a request line too long to read has no URI of its
    # own, and nginx cannot send it to a named location.
    error_page_lines = "\n".join(f"        error_page {code} ={status} /.front/{code};"
                                  for code, status, _ in pages)
    error_locations = "\n".join(
        f"        location = /.front/{code} {{\n"
        f"            internal;\n"
        f"            default_type application/problem+json;\n"
        f"            return {status} '{text}';\n"
        f"        }}" for code, status, text in pages)
    return f"""# Generated by `stifflane` (cli/front.py); rewritten on every start.
{f"user {user};" if user else "# user: not root, so nginx's workers run as this account"}
worker_processes 1;
pid {d}/nginx.pid;
error_log {d}/error.log warn;
events {{ worker_connections 4096; }}

http {{
    client_body_temp_path {d}/tmp/body;
    proxy_temp_path {d}/tmp/proxy;
    fastcgi_temp_path {d}/tmp/fastcgi;
    uwsgi_temp_path {d}/tmp/uwsgi;
    scgi_temp_path {d}/tmp/scgi;
    types {{ application/json json; }}
    default_type application/octet-stream;
    server_tokens off;

    # $uri is the path without the query string: no parameter ever reaches the log.
    log_format front '$remote_addr [$time_local] "$request_method $uri $server_protocol" '
                     '$status $body_bytes_sent $request_time';
    access_log /dev/stdout front;

    client_header_timeout {HEADER_SECONDS}s;
    client_body_timeout {BODY_SECONDS}s;
    send_timeout {SEND_SECONDS}s;
    keepalive_timeout 15s;
    reset_timedout_connection on;
    client_max_body_size {max_body_bytes};
    client_body_buffer_size 256k;
    client_header_buffer_size 1k;
    large_client_header_buffers {HEADER_BUFFERS} {HEADER_BUFFER};
    limit_conn_zone $binary_remote_addr zone=per_address:1m;
    limit_conn_status 429;

    upstream api {{
        server unix:{socket_path(d)};
        keepalive 8;
    }}

    server {{
        listen {listen} default_server;
        limit_conn per_address {CONNECTIONS_PER_ADDRESS};
        proxy_intercept_errors off;

        location / {{
            proxy_pass http://api;
            proxy_http_version 1.1;
            proxy_set_header Connection "";
            proxy_request_buffering on;
            proxy_buffering on;
            proxy_set_header Host $http_host;
            proxy_set_header X-Forwarded-For $remote_addr;
            proxy_set_header X-Forwarded-Proto $scheme;
            proxy_connect_timeout 5s;
            proxy_read_timeout 120s;
        }}

{error_page_lines}
{error_locations}
    }}
}}
"""


def write_config(host: str, port: int, front_dir: Path, max_body_bytes: int) -> Path:
    front_dir.mkdir(parents=True, exist_ok=True)
    front_dir.chmod(0o700)  # the socket inside is reachable only by this account
    for sub in ("body", "proxy", "fastcgi", "uwsgi", "scgi"):
        (front_dir / "tmp" / sub).mkdir(parents=True, exist_ok=True)
    user = None
    if os.geteuid() == 0:  # nginx would switch its workers to 'nobody', who cannot reach the socket
        import pwd

        user = pwd.getpwuid(0).pw_name
    conf = front_dir / "nginx.conf"
    conf.write_text(config_text(host, port, front_dir, max_body_bytes, user))
    return conf


def nginx_command(front_dir: Path) -> list[str]:
    binary = nginx_binary()
    if binary is None:
        raise SystemExit(INSTALL_HINT)
    d = front_dir.resolve()
    return [binary, "-p", str(d), "-c", str(d / "nginx.conf"), "-e", str(d / "error.log"),
            "-g", "daemon off;"]


def behind_front(cmd: list[str], front_dir: Path) -> list[str]:
    """gunicorn's command bound to the front's socket, with head limits above the front's."""
    out = list(cmd)
    i = out.index("--bind")
    out[i + 1] = f"unix:{socket_path(front_dir.resolve())}"
    return out[:-1] + ["--limit-request-line", "8190", "--limit-request-field_size", "8190",
                       "--limit-request-fields", "32768", out[-1]]


def start_api(host: str, port: int, spawn: Spawn, *, workers: int = 2, front: bool = True,
              front_dir: Path = FRONT_DIR, max_body_bytes: int | None = None,
              wait_seconds: float = 30.0) -> list[tuple[str, subprocess.Popen]]:
    """Start gunicorn, and nginx in front of it on host:port (or gunicorn alone there with
    ``front=False``). Returns the (name, process) pairs started, gunicorn first."""
    if not front:
        return [("api", spawn("api", api_command(host, port, workers)))]
    if nginx_binary() is None:
        raise SystemExit(INSTALL_HINT)
    if max_body_bytes is None:
        from jobs.settings import Settings

        max_body_bytes = Settings.from_env().max_body_bytes
    write_config(host, port, front_dir, max_body_bytes)
    check = subprocess.run(nginx_command(front_dir) + ["-t", "-q"], capture_output=True, text=True)
    if check.returncode != 0:
        raise SystemExit(f"the front's configuration was refused: {check.stderr.strip()}")
    sock = socket_path(front_dir)
    sock.unlink(missing_ok=True)
    api = spawn("api", behind_front(api_command(host, port, workers), front_dir))
    deadline = time.time() + wait_seconds
    while not sock.exists():
        if api.poll() is not None or time.time() > deadline:
            api.poll() is None and api.terminate()
            raise SystemExit(f"gunicorn did not open {sock} (exit {api.poll()})")
        time.sleep(0.1)
    return [("api", api), ("front", spawn("front", nginx_command(front_dir)))]


def serve(host: str, port: int, workers: int, env: dict, front_dir: Path = FRONT_DIR) -> int:
    """`stifflane api --front`: the API and its front in the foreground until either exits
    (the deployment restarts the pair; see docker-compose.yml)."""
    import signal

    def spawn(name, cmd):
        return subprocess.Popen(cmd, env=env, cwd=ROOT)

    procs = start_api(host, port, spawn, workers=workers, front_dir=front_dir)

    def _stop(signum, frame):
        raise KeyboardInterrupt

    signal.signal(signal.SIGTERM, _stop)
    try:
        while all(p.poll() is None for _, p in procs):
            time.sleep(0.5)
        return 1
    except KeyboardInterrupt:
        return 0
    finally:
        for _, p in reversed(procs):
            if p.poll() is None:
                p.terminate()
        for _, p in reversed(procs):
            try:
                p.wait(15)
            except subprocess.TimeoutExpired:
                p.kill()
