"""Wall-time and memory bounds on model preparation inside a worker process.

Preparing a model (parse, differentiate, compile programs, maybe machine code) runs before
the integrator's own wall clock starts, so it is bounded here: a timer and a memory
watchdog interrupt the worker's main thread with SIGALRM, and the job ends as
``time_limit`` or ``memory_limit`` with a message instead of holding the worker. The
size limits of the model language (engine.language.check) keep ordinary models far from
both bounds; these catch what sizes cannot predict.
"""
from __future__ import annotations

import os
import signal
import threading
from contextlib import contextmanager

# Growth of the worker's resident memory allowed while preparing one model
# (STIFFLANE_PREPARE_MAX_MB); the whole child is also recycled by Celery past 2 GB.
DEFAULT_PREPARE_MAX_MB = 1024.0
_PAGE = os.sysconf("SC_PAGE_SIZE") if hasattr(os, "sysconf") else 4096


class PreparationLimit(Exception):
    """Preparation passed a bound: ``outcome`` is time_limit or memory_limit."""

    def __init__(self, outcome: str, message: str):
        super().__init__(message)
        self.outcome, self.message = outcome, message


def prepare_max_bytes() -> int:
    return int(float(os.environ.get("STIFFLANE_PREPARE_MAX_MB", DEFAULT_PREPARE_MAX_MB)) * 2**20)


def resident_bytes() -> int:
    """This process's resident memory (Linux /proc; 0 where unavailable)."""
    try:
        with open("/proc/self/statm") as f:
            return int(f.read().split()[1]) * _PAGE
    except (OSError, ValueError, IndexError):
        return 0


@contextmanager
def bounded(seconds: float, max_growth: int | None = None, poll: float = 0.02):
    """Raise PreparationLimit in the block after ``seconds`` or once resident memory grew by
    more than ``max_growth`` bytes. Only in the main thread (where signals are delivered);
    elsewhere the block runs unbounded."""
    if threading.current_thread() is not threading.main_thread() or not hasattr(signal, "setitimer"):
        yield
        return
    max_growth = prepare_max_bytes() if max_growth is None else max_growth
    start = resident_bytes()
    tripped: list[PreparationLimit] = []
    main = threading.main_thread().ident

    def on_alarm(signum, frame):
        raise tripped[0] if tripped else PreparationLimit(
            "time_limit", f"preparing the model took longer than {seconds:g} s (the job's "
                          f"max_wall_seconds covers preparation and solve): simplify the model "
                          f"or raise limits.max_wall_seconds")

    stop = threading.Event()

    def watch():
        while not stop.wait(poll):
            grown = resident_bytes() - start
            if start and grown > max_growth:
                tripped.append(PreparationLimit(
                    "memory_limit", f"preparing the model needed more than {max_growth / 2**20:.0f} MB "
                                    f"of memory: the model is too large for this worker"))
                signal.pthread_kill(main, signal.SIGALRM)
                return

    previous = signal.signal(signal.SIGALRM, on_alarm)
    watcher = threading.Thread(target=watch, name="prepare-watchdog", daemon=True)
    try:
        signal.setitimer(signal.ITIMER_REAL, max(seconds, 1e-3))
        watcher.start()
        yield
    finally:
        stop.set()
        if watcher.is_alive():
            watcher.join()
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous)
