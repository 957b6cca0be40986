"""`stifflane up` as a user runs it: start-up lines, then the framed block with the key and the
URLs last; a second stack on the same folder or port is refused while it runs; Ctrl-C stops
the front, the API, the worker and then Redis, with no traceback."""
import os
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pytest
import requests

from cli import local_stack
from tests.conftest import ROOT, free_port


def read(path: Path) -> str:
    return path.read_text(errors="replace") if path.exists() else ""


def wait_for(predicate, seconds: float, what: str, proc=None, logs=()):
    deadline = time.time() + seconds
    while time.time() < deadline:
        if predicate():
            return
        if proc is not None and proc.poll() is not None:
            break
        time.sleep(0.2)
    raise AssertionError(f"{what}\n" + "\n".join(read(p)[-4000:] for p in logs))


def alive(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/stat") as f:
            return f.read().split()[2] != "Z"
    except FileNotFoundError:
        return False


def descendants(pid: int) -> set[int]:
    out, todo = set(), [pid]
    while todo:
        p = todo.pop()
        try:
            children = Path(f"/proc/{p}/task/{p}/children").read_text().split()
        except FileNotFoundError:
            continue
        for c in map(int, children):
            out.add(c)
            todo.append(c)
    return out


@pytest.mark.e2e
def test_up_prints_the_block_last_refuses_a_second_stack_and_stops_in_order():
    var = Path(tempfile.mkdtemp(prefix="sl-up-"))  # short: the front's unix socket lives in it
    port, redis_port = free_port(), free_port()
    env = {k: v for k, v in os.environ.items() if k not in ("REDIS_URL", "STIFFLANE_URL", "STIFFLANE_KEY")}
    env.update(STIFFLANE_VAR=str(var), PYTHONUNBUFFERED="1")
    out, err = var / "up.out", var / "up.err"
    cmd = [sys.executable, "-m", "cli.main", "up", "--no-demo", "--concurrency", "1",
           "--port", str(port), "--redis-port", str(redis_port)]
    up = subprocess.Popen(cmd, cwd=ROOT, env=env, stdout=out.open("wb"), stderr=err.open("wb"),
                          start_new_session=True)  # its own group, as a shell job is
    children: set[int] = set()
    try:
        # generous: the kernels load from the cache (compiled by `stifflane warm`), a worker starts
        wait_for(lambda: "Ctrl-C stops every process" in read(out), 180, "no ready block", up, (out, err))
        children = descendants(up.pid)
        text = read(out)
        top = text.rindex("\n+-", 0, text.rindex("\n+-"))  # the block's upper rule
        block = text[top:]
        assert text.index("redis: 127.0.0.1") < text.index("engine kernels ready") < text.index("worker: starting")
        assert text.index("waiting for the API") < top
        key = (var / "local.key").read_text().strip()
        assert f"http://127.0.0.1:{port}/" in block and key in block
        assert f"export STIFFLANE_URL=http://127.0.0.1:{port}" in block  # not the client's default port
        assert "export STIFFLANE_KEY=$(cat" in block

        # a second stack on the same folder, and one on the same port: refused, the first untouched
        again = subprocess.run(cmd, cwd=ROOT, env=env, capture_output=True, text=True, timeout=60)
        assert again.returncode == 1 and "another stifflane stack is running" in again.stderr
        assert f"pid {up.pid}" in again.stderr and f"http://127.0.0.1:{port}" in again.stderr
        other = Path(tempfile.mkdtemp(prefix="sl-up2-"))
        same_port = subprocess.run(
            [*cmd[:-4], "--port", str(port), "--redis-port", str(free_port())], cwd=ROOT,
            env=dict(env, STIFFLANE_VAR=str(other)), capture_output=True, text=True, timeout=60)
        shutil.rmtree(other, ignore_errors=True)
        assert same_port.returncode == 1 and f"API port {port} on 127.0.0.1 is already in use" in same_port.stderr
        assert "API key" not in same_port.stdout and not (other / "redis" / "redis.conf").exists()
        assert up.poll() is None

        # the operator's key commands find this stack's Redis by themselves
        keys = subprocess.run([sys.executable, "-m", "cli.main", "keys", "list"], cwd=ROOT, env=env,
                              capture_output=True, text=True, timeout=60)
        assert keys.returncode == 0 and "local stack" in keys.stdout, keys.stderr

        # a long job keeps the worker busy: its heartbeats need Redis until the worker has stopped
        long_run = {"model": {"states": {"u": 1.0, "v": 0.0}, "ddt": {"u": "v", "v": "-u"}}, "span": [0, 1e7],
                    "tolerance": {"rtol": 1e-12, "atol": 1e-14}, "method": "dormand_prince_54",
                    "limits": {"max_steps": 100_000_000, "max_wall_seconds": 120}}
        answer = requests.post(f"http://127.0.0.1:{port}/v1/jobs", json=long_run, timeout=10,
                               headers={"Authorization": f"Bearer {key}"})
        assert answer.status_code == 202
        job_url = f"http://127.0.0.1:{port}/v1/jobs/{answer.json()['id']}"
        wait_for(lambda: requests.get(job_url, headers={"Authorization": f"Bearer {key}"},
                                      timeout=10).json()["state"] == "running", 60, "the job never ran")

        os.killpg(up.pid, signal.SIGINT)  # Ctrl-C in the terminal: the whole foreground group
        assert up.wait(120) == 130
    finally:
        if up.poll() is None:
            os.killpg(up.pid, signal.SIGKILL)
        for pid in descendants(up.pid) | children:
            try:
                os.kill(pid, signal.SIGKILL)
            except ProcessLookupError:
                pass
    text, errors = read(out), read(err)
    stops = [line for line in text.splitlines() if line.startswith("stopped ")]
    assert stops == ["stopped front", "stopped api", "stopped worker", "stopped redis"], text[-3000:]
    assert "Traceback" not in text + errors, errors[-5000:]
    assert "Connection refused" not in text + errors  # nothing of the stack outlived Redis
    assert not [pid for pid in children if alive(pid)]
    assert not local_stack.is_held(local_stack.stack_lock(var))
    assert not local_stack.is_held(local_stack.redis_lock(var / "redis"))
    shutil.rmtree(var, ignore_errors=True)
