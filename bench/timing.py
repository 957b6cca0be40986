"""Timing one solver run: a warm-up, then the median of repeated runs within a budget."""
from __future__ import annotations

import statistics
import time

SLOW = 5.0         # seconds: a compiled peer's warm-up this long is repeated only once
SLOW_PLAIN = 0.5   # seconds: any other peer this slow keeps its warm-up as the sample


def measure(call, budget: float, max_repeats: int, jit: bool) -> dict:
    """Run ``call()`` (returns a result dict); add seconds (median), repeats, warmup_seconds.

    The warm-up run loads compiled code and caches. A run that did not reach the end is
    not repeated. A non-compiled peer whose warm-up was slow keeps the warm-up time as
    its only sample (re-running would only cost time).
    """
    t0 = time.perf_counter()
    first = call()
    warm = time.perf_counter() - t0
    if first["status"] != "ok" or (warm > SLOW_PLAIN and not jit):
        return dict(first, seconds=warm, repeats=1, warmup_seconds=warm)
    samples, last = [], first
    spent = 0.0
    while not samples or (len(samples) < max_repeats and spent < budget and warm <= SLOW):
        t0 = time.perf_counter()
        last = call()
        dt = time.perf_counter() - t0
        samples.append(dt)
        spent += dt
        if last["status"] != "ok":
            return dict(last, seconds=dt, repeats=len(samples), warmup_seconds=warm)
    return dict(last, seconds=statistics.median(samples), repeats=len(samples),
                warmup_seconds=warm)
