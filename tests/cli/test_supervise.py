"""The supervisor restarts a process that exits, with growing delays, and stops it on SIGTERM."""
import os
import signal
import subprocess
import sys
import time

from tests.conftest import ROOT

CHILD = """
import os, subprocess, sys, time
runs = os.path.join(sys.argv[1], "runs")
n = len(open(runs).read()) if os.path.exists(runs) else 0
open(runs, "a").write("x")
if n == 0:  # first run: leave an orphan behind (like a pool child), then die
    orphan = subprocess.Popen(["sleep", "120"])
    open(os.path.join(sys.argv[1], "orphan"), "w").write(str(orphan.pid))
    os._exit(1)
if n < 3:
    sys.exit(3)
time.sleep(120)  # healthy from the fourth run on
"""


def alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    with open(f"/proc/{pid}/stat") as f:
        return f.read().split()[2] != "Z"


def test_a_process_that_exits_is_restarted_with_backoff_and_stopped_on_sigterm(tmp_path):
    script = tmp_path / "child.py"
    script.write_text(CHILD)
    sup = subprocess.Popen([sys.executable, "-m", "cli.supervise", "--name", "probe", "--initial-delay", "0.1",
                            "--", sys.executable, str(script), str(tmp_path)],
                           cwd=ROOT, stderr=subprocess.PIPE, text=True)
    deadline = time.time() + 60  # generous: three restarts take 0.1 + 0.2 + 0.4 s plus start-ups
    while time.time() < deadline and len((tmp_path / "runs").read_text() if (tmp_path / "runs").exists() else "") < 4:
        time.sleep(0.05)
    assert (tmp_path / "runs").read_text() == "xxxx"
    assert not alive(int((tmp_path / "orphan").read_text()))  # the dead run's group was cleaned up
    sup.send_signal(signal.SIGTERM)
    assert sup.wait(30) == 128 + signal.SIGTERM
    log = sup.stderr.read()
    assert "restart 1 in 0.1 s" in log and "restart 2 in 0.2 s" in log and "restart 3 in 0.4 s" in log, log
    assert "exited with status 3" in log
