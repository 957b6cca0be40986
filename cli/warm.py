"""``stifflane warm``: load the engine's compiled kernels, or compile them, saying what happens.

The first start of an engine version compiles its kernels (about a minute on two cores) into
the numba cache; every later start loads them in seconds. While compiling, a status line says
how many functions are done, which one is compiling and the time so far (numba's
``numba:compile`` events: one per function actually compiled, none for cache loads), rewritten
in place on a terminal and printed every few seconds otherwise (logs, CI).
"""
from __future__ import annotations

import os
import sys
import threading
import time
from pathlib import Path

from cli.local_stack import shown


def cache_is_cold(cache_dir: str | os.PathLike) -> bool:
    """No compiled kernel in the cache folder yet (this engine version never ran here)."""
    d = Path(cache_dir)
    return not (d.is_dir() and any(d.rglob("*.nbi")))


class Progress:
    """The status line: compiled count, the function compiling now, elapsed seconds."""

    def __init__(self, out=None, interval: float | None = None, tty: bool | None = None):
        self.out = out or sys.stdout
        self.tty = self.out.isatty() if tty is None else tty
        self.interval = interval if interval is not None else (1.0 if self.tty else 5.0)
        self.started = time.perf_counter()
        self.compiled = 0
        self.compiling: list[str] = []  # nested: a kernel compiles the functions it calls
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._tick, name="warm-progress", daemon=True)
        self._shown = False

    # called by numba's compile events (see warm())
    def on_start(self, event) -> None:
        data = event.data or {}
        dispatcher = data.get("dispatcher")
        name = getattr(getattr(dispatcher, "py_func", None), "__name__", None) or "kernel"
        with self._lock:
            self.compiling.append(name)

    def on_end(self, event) -> None:
        with self._lock:
            if self.compiling:
                self.compiling.pop()
            self.compiled += 1

    def line(self) -> str:
        with self._lock:
            now = f"; now {self.compiling[-1]}" if self.compiling else ""
            done = self.compiled
        return f"  compiling: {done} function{'s' if done != 1 else ''} done{now} ({self.elapsed():.0f} s)"

    def elapsed(self) -> float:
        return time.perf_counter() - self.started

    def _write(self, text: str, final: bool = False) -> None:
        if self.tty:
            self.out.write("\r\033[K" + text + ("\n" if final else ""))
        else:
            self.out.write(text + "\n")
        self.out.flush()
        self._shown = True

    def _tick(self) -> None:
        while not self._stop.wait(self.interval):
            self._write(self.line())

    def start(self) -> None:
        self._thread.start()

    def stop(self) -> None:
        self._stop.set()
        if self._thread.is_alive():
            self._thread.join(5)
        if self._shown or self.compiled:
            self._write(self.line(), final=True)


def compile_listener(progress: Progress):
    """A numba event listener that tells ``progress`` of every function compiled."""
    from numba.core import event

    class Listener(event.Listener):
        def on_start(self, ev):
            progress.on_start(ev)

        def on_end(self, ev):
            progress.on_end(ev)

    return Listener()


def warm(out=None, cold: bool | None = None, interval: float | None = None) -> float:
    """Load or compile every kernel (engine.warmup.warm_up), with progress while compiling.
    Returns the seconds it took."""
    out = out or sys.stdout
    cache = os.environ.get("NUMBA_CACHE_DIR", "")
    cold = cache_is_cold(cache) if cold is None else cold
    started = time.perf_counter()
    if cold:
        print(f"engine: compiling the kernels into {shown(Path(cache))} (first start of this engine "
              "version: about a minute, once; later starts load them in seconds)", file=out, flush=True)
    else:
        print("engine: loading the compiled kernels ...", file=out, flush=True)
    from numba.core import event

    from engine.warmup import warm_up

    progress = Progress(out, interval)
    progress.start()
    try:
        with event.install_listener("numba:compile", compile_listener(progress)):
            warm_up()
    finally:
        progress.stop()
    seconds = time.perf_counter() - started
    how = f"compiled {progress.compiled} functions" if progress.compiled else "loaded from the cache"
    print(f"engine kernels ready in {seconds:.1f} s ({how})", file=out, flush=True)
    return seconds
