"""Keep a process running: restart it with backoff whenever it exits (the stack's workers).

``stifflane worker`` and ``stifflane up`` run each Celery worker under this supervisor, so a
worker that exits for any reason (a library fault after a broker crash, the memory limit of
its main process, a kill) is started again without anyone acting. Restarts back off
exponentially (1 s, 2 s, 4 s ... at most 30 s) and the delay returns to 1 s once a worker has
run for a minute. SIGTERM or SIGINT to the supervisor are passed on to the worker (Celery
then finishes its running tasks: a warm shutdown), SIGQUIT too (a cold shutdown), and the
supervisor exits with the worker's status. The worker runs in a process group of its own; when its main process is gone, what
is left of the group (orphaned pool children) is killed before the restart. On Linux the
worker also receives SIGTERM if the supervisor itself dies.

A deployment with a process manager of its own (the compose file's
``restart: unless-stopped``, systemd's ``Restart=always``) restarts the supervisor if it
ever exits; the supervisor restarts the worker inside it.

    python -m cli.supervise [--name worker] -- COMMAND [ARGS...]
"""
from __future__ import annotations

import argparse
import os
import signal
import subprocess
import sys
import time

INITIAL_DELAY = 1.0
MAX_DELAY = 30.0
HEALTHY_AFTER = 60.0  # seconds of running that reset the backoff


def command(inner: list[str], name: str = "worker") -> list[str]:
    """The command line that runs ``inner`` under the supervisor."""
    return [sys.executable, "-m", "cli.supervise", "--name", name, "--", *inner]


def die_with_parent() -> None:
    """In the child before exec: own process group (a terminal's Ctrl-C reaches only the parent,
    which stops its children in order); SIGTERM when the parent dies (Linux)."""
    os.setpgid(0, 0)
    try:
        import ctypes

        PR_SET_PDEATHSIG = 1
        ctypes.CDLL(None, use_errno=True).prctl(PR_SET_PDEATHSIG, signal.SIGTERM)
    except (OSError, AttributeError):  # not Linux: the group is still cleaned up on exit
        pass


class Supervisor:
    def __init__(self, inner: list[str], name: str = "worker", initial_delay: float = INITIAL_DELAY,
                 max_delay: float = MAX_DELAY, healthy_after: float = HEALTHY_AFTER, log=None):
        self.inner, self.name = inner, name
        self.initial_delay, self.max_delay, self.healthy_after = initial_delay, max_delay, healthy_after
        self.log = log or (lambda text: print(f"supervisor: {text}", file=sys.stderr, flush=True))
        self.child: subprocess.Popen | None = None
        self.stopping: int | None = None  # the signal that asked us to stop
        self.restarts = 0

    def _on_signal(self, signum, _frame) -> None:
        self.stopping = signum
        if self.child is not None and self.child.poll() is None:
            try:
                self.child.send_signal(signum)
            except ProcessLookupError:
                pass

    def _reap_group(self, pid: int) -> None:
        try:
            os.killpg(pid, signal.SIGKILL)
        except (ProcessLookupError, PermissionError):
            pass

    def _sleep(self, seconds: float) -> None:
        deadline = time.monotonic() + seconds
        while self.stopping is None and time.monotonic() < deadline:
            time.sleep(min(0.1, max(deadline - time.monotonic(), 0.0)))

    def run(self) -> int:
        # SIGQUIT too: Celery's cold shutdown, for a stop that cannot wait for running jobs.
        for signum in (signal.SIGTERM, signal.SIGINT, signal.SIGHUP, signal.SIGQUIT):
            signal.signal(signum, self._on_signal)
        delay = self.initial_delay
        while True:
            started = time.monotonic()
            self.child = subprocess.Popen(self.inner, preexec_fn=die_with_parent)
            self.log(f"{self.name} started (pid {self.child.pid})")
            code = self.child.wait()
            self._reap_group(self.child.pid)
            if self.stopping is not None:
                return code if code >= 0 else 128 - code
            ran = time.monotonic() - started
            if ran >= self.healthy_after:
                delay = self.initial_delay
            self.restarts += 1
            how = f"signal {-code}" if code < 0 else f"status {code}"
            self.log(f"{self.name} (pid {self.child.pid}) exited with {how} after {ran:.1f} s; "
                     f"restart {self.restarts} in {delay:g} s")
            self._sleep(delay)
            if self.stopping is not None:
                return 128 + self.stopping
            delay = min(2 * delay, self.max_delay)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(prog="python -m cli.supervise", description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--name", default="worker")
    ap.add_argument("--initial-delay", type=float, default=INITIAL_DELAY)
    ap.add_argument("--max-delay", type=float, default=MAX_DELAY)
    ap.add_argument("inner", nargs=argparse.REMAINDER)
    args = ap.parse_args(argv)
    inner = args.inner[1:] if args.inner[:1] == ["--"] else args.inner
    if not inner:
        ap.error("no command to supervise")
    return Supervisor(inner, args.name, args.initial_delay, args.max_delay).run()


if __name__ == "__main__":
    sys.exit(main())
