"""The local stack's folder: `keys` finds the local Redis by itself; one Redis per data folder;
`up` refuses a busy port or a folder another stack runs on, before it starts anything."""
import shutil
import socket
import subprocess
import sys
import tempfile
from pathlib import Path

import pytest

from cli import common, local_stack
from cli.main import main
from cli.redis_server import DataInUse, start_redis
from tests.conftest import ROOT, free_port


@pytest.fixture
def var(monkeypatch):
    d = Path(tempfile.mkdtemp(prefix="sl-var-"))  # short: unix sockets live in it
    for name in ("REDIS_URL", "STIFFLANE_REDIS_URL", "STIFFLANE_KEY_PREFIX"):
        monkeypatch.delenv(name, raising=False)
    monkeypatch.setenv("STIFFLANE_VAR", str(d))
    yield d
    shutil.rmtree(d, ignore_errors=True)


@pytest.fixture
def local_redis(var):
    proc = start_redis(free_port(), var / "redis")
    yield proc
    proc.terminate()
    proc.wait(10)


def test_keys_use_the_local_stacks_redis_and_password_without_any_setting(local_redis, capsys):
    """It used to answer 'Authentication required' (the default address, without the password)."""
    assert main(["keys", "create", "carol", "--label", "laptop"]) == common.OK
    capsys.readouterr()
    assert main(["keys", "list"]) == common.OK
    listing = capsys.readouterr().out
    assert "carol" in listing and "laptop" in listing


def test_keys_without_a_running_stack_say_how_to_get_one(var, capsys):
    assert main(["keys", "list"]) == common.API_ERROR
    err = capsys.readouterr().err
    assert "no local stack is running" in err and "stifflane up" in err and "REDIS_URL" in err


def test_a_second_redis_on_the_same_data_folder_is_refused(local_redis, var):
    with pytest.raises(DataInUse) as info:
        start_redis(free_port(), var / "redis")
    text = str(info.value)
    assert f"pid {local_redis.pid}" in text and "in use by a running redis-server" in text
    assert local_redis.poll() is None  # the first one untouched


def test_the_redis_lock_lives_as_long_as_the_server(local_redis, var):
    lock = local_stack.redis_lock(var / "redis")
    assert local_stack.is_held(lock)
    local_redis.terminate()
    local_redis.wait(10)
    assert not local_stack.is_held(lock)


def run_up(*args, env_var: Path, timeout=60):
    """`stifflane up` in a process of its own (it must refuse before starting anything)."""
    import os

    env = dict(os.environ, STIFFLANE_VAR=str(env_var))
    env.pop("REDIS_URL", None)
    return subprocess.run([sys.executable, "-m", "cli.main", "up", "--no-demo", *args], cwd=ROOT, env=env,
                          capture_output=True, text=True, timeout=timeout)


def test_up_on_a_busy_api_port_refuses_before_starting_anything(var):
    with socket.socket() as other:  # another server holds the port
        other.bind(("127.0.0.1", 0))
        other.listen()
        port = other.getsockname()[1]
        done = run_up("--port", str(port), "--redis-port", str(free_port()), env_var=var)
    assert done.returncode == 1
    assert f"API port {port} on 127.0.0.1 is already in use" in done.stderr
    assert "stifflane up --port" in done.stderr
    assert "stack running" not in done.stdout and "API key" not in done.stdout
    assert not (var / "redis" / "redis.conf").exists()  # nothing was started


def test_up_on_a_busy_redis_port_refuses_before_starting_anything(var):
    with socket.socket() as other:
        other.bind(("127.0.0.1", 0))
        other.listen()
        port = other.getsockname()[1]
        done = run_up("--port", str(free_port()), "--redis-port", str(port), env_var=var)
    assert done.returncode == 1
    assert f"Redis port {port} on 127.0.0.1 is already in use" in done.stderr
    assert "stifflane up --redis-port" in done.stderr
    assert not (var / "redis" / "redis.conf").exists()


def test_up_on_a_folder_another_stack_holds_is_refused(var):
    fd = local_stack.take_lock(local_stack.stack_lock(var))
    local_stack.write_holder(fd, {"pid": 4242, "api": "http://127.0.0.1:8750"})
    try:
        done = run_up("--port", str(free_port()), "--redis-port", str(free_port()), env_var=var)
    finally:
        import os

        os.close(fd)
    assert done.returncode == 1
    assert "another stifflane stack is running" in done.stderr and "pid 4242" in done.stderr
    assert "http://127.0.0.1:8750" in done.stderr and "kill 4242" in done.stderr


def test_a_busy_port_is_told_from_a_free_one():
    with socket.socket() as other:
        other.bind(("127.0.0.1", 0))
        other.listen()
        assert local_stack.port_problem("127.0.0.1", other.getsockname()[1]) == "already in use by another program"
    assert local_stack.port_problem("127.0.0.1", free_port()) is None
