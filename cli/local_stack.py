"""The local stack's folder (``var/``): one stack per folder, free ports, and where its Redis is.

- ``stifflane up`` holds an exclusive lock on ``<var>/stack.lock`` for as long as it runs and
  writes who it is into the file (pid, API address, Redis port). A second ``up`` on the same
  folder is refused with the first one's pid and address.
- The embedded Redis holds ``<var>/redis/redis.lock``; the lock is handed to redis-server
  itself, so it lives exactly as long as the server does, whoever started it (``up`` or
  ``stifflane redis``). Two servers never share one AOF. The file says the server's port.
- ``stifflane keys`` finds the local Redis from that file and the password beside it
  (``<var>/redis/password``), so it works without REDIS_URL on the machine running the stack.

The folder is the project's ``var/`` unless ``--var`` or ``STIFFLANE_VAR`` names another.
"""
from __future__ import annotations

import errno
import fcntl
import json
import os
import socket
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
STACK_LOCK = "stack.lock"
REDIS_LOCK = "redis.lock"


def default_var() -> Path:
    return Path(os.environ.get("STIFFLANE_VAR") or ROOT / "var")


def shown(path: Path) -> str:
    """A path as the user would type it: relative to the working folder when inside it."""
    try:
        return str(Path(path).resolve().relative_to(Path.cwd()))
    except ValueError:
        return str(path)


# ---- locks ------------------------------------------------------------------------------

def take_lock(path: Path) -> int | None:
    """An exclusive lock on ``path`` (made if missing): its file descriptor, or None when another
    process holds it. The lock is released when every descriptor of it is closed (a process
    that dies releases it too, so a stale file never blocks a start)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o600)
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError as e:
        os.close(fd)
        if e.errno in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
            return None
        raise
    return fd


def write_holder(fd: int, info: dict) -> None:
    """Say in the lock file who holds it (read by the next start and by ``keys``)."""
    data = json.dumps(info).encode()
    os.ftruncate(fd, 0)
    os.pwrite(fd, data, 0)


def holder(path: Path) -> dict:
    """What the holder of a lock wrote into it ({} when nothing readable)."""
    try:
        return json.loads(path.read_text() or "{}")
    except (OSError, ValueError):
        return {}


def is_held(path: Path) -> bool:
    if not path.exists():
        return False
    fd = take_lock(path)
    if fd is None:
        return True
    os.close(fd)
    return False


def stack_lock(var: Path) -> Path:
    return var / STACK_LOCK


def redis_lock(data_dir: Path) -> Path:
    return data_dir / REDIS_LOCK


def another_stack_message(var: Path) -> str:
    info = holder(stack_lock(var))
    pid = info.get("pid")
    who = f" (pid {pid}" + (f", API at {info['api']}" if info.get("api") else "") + ")" if pid else ""
    stop = f"Ctrl-C in its terminal, or 'kill {pid}'" if pid else "Ctrl-C in its terminal"
    return (f"another stifflane stack is running on the folder {shown(var)}{who}; two stacks must not "
            f"share its Redis data, front and key files.\nStop it first ({stop}), or start this one "
            f"on a folder and ports of its own: stifflane up --var DIR --port PORT --redis-port PORT")


def redis_in_use_message(data_dir: Path) -> str:
    info = holder(redis_lock(data_dir))
    pid, port = info.get("pid"), info.get("port")
    who = (f" (pid {pid}" + (f", port {port}" if port else "") + ")") if pid else ""
    stop = f"'kill {pid}'" if pid else "Ctrl-C where it was started"
    return (f"the Redis data in {shown(data_dir)} is in use by a running redis-server{who}; two "
            f"servers on one data folder would corrupt it.\nStop that server first ({stop}), or use "
            f"it: export REDIS_URL=... (see {shown(data_dir / 'password')}), or give this one a data "
            f"folder of its own")


# ---- ports ------------------------------------------------------------------------------

def port_problem(host: str, port: int) -> str | None:
    """Why nothing of ours can listen on host:port (None when it can). SO_REUSEADDR as servers
    set it: a port held only by connections closing down (TIME_WAIT) counts as free."""
    family = socket.AF_INET6 if ":" in host else socket.AF_INET
    with socket.socket(family, socket.SOCK_STREAM) as s:
        s.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        try:
            s.bind((host, port))
        except OSError as e:
            if e.errno == errno.EADDRINUSE:
                return "already in use by another program"
            if e.errno == errno.EACCES:
                return "reserved for the administrator (ports below 1024)"
            return e.strerror or str(e)
    return None


def next_free_port(host: str, after: int, avoid: set[int] = frozenset(), tries: int = 50) -> int | None:
    for port in range(after + 1, min(after + 1 + tries, 65536)):
        if port not in avoid and port_problem(host, port) is None:
            return port
    return None


def busy_port_message(what: str, option: str, host: str, port: int, problem: str,
                      avoid: set[int] = frozenset()) -> str:
    free = next_free_port(host, port, avoid | {port})
    choose = f"{option} {free}" if free else f"{option} PORT"
    text = (f"cannot start: the {what} port {port} on {host} is {problem} (another stifflane stack, "
            f"or another server).\nStop the program that holds it, or choose another port: "
            f"stifflane up {choose}")
    return text


# ---- the local Redis, for the operator commands ------------------------------------------

def local_redis_url(var: Path) -> str | None:
    """redis://... of the embedded Redis running on ``var`` (None when none is running)."""
    data = var / "redis"
    lock = redis_lock(data)
    password_file = data / "password"
    if not (is_held(lock) and password_file.exists()):
        return None
    port = holder(lock).get("port")
    if not isinstance(port, int):
        return None
    return f"redis://:{password_file.read_text().strip()}@127.0.0.1:{port}/0"
