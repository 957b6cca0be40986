"""The embedded Redis keeps its data private: folder 0700, AOF and every other file 0600."""
import os
import stat

import redis

from cli.redis_server import password, start_redis
from tests.conftest import free_port


def test_the_aof_and_every_data_file_are_private(tmp_path):
    data = tmp_path / "redis"
    data.mkdir()
    old = data / "stifflane.aof"  # left by an earlier version, world-readable
    old.write_bytes(b"")
    old.chmod(0o644)
    port = free_port()
    proc = start_redis(port, data)
    try:
        client = redis.Redis(port=port, password=password(data))
        client.set("probe", "x")
        client.bgrewriteaof()  # a rewrite makes new files: they must be private too
        client.save()
    finally:
        proc.terminate()
        proc.wait(10)
    files = [p for p in data.rglob("*") if p.is_file()]
    assert any(p.name.endswith(".aof") for p in files)
    modes = {p.name: stat.S_IMODE(os.stat(p).st_mode) for p in files}
    assert all(m == 0o600 for m in modes.values()), modes
    assert stat.S_IMODE(os.stat(data).st_mode) == 0o700
