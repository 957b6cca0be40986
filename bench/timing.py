"""Timing one solver run: a warm-up, then the median of repeated runs within a budget."""
from __future__ import annotations

import statistics
import time

SLOW = 5.0         # seconds: a compiled peer's warm-up this long is repeated only once
SLOW_PLAIN = 0.5   # seconds: any other peer this slow keeps its warm-up as the sample
# A sub-millisecond run repeats until this much time is sampled (at most MAX_FAST_REPEATS
# runs): a median of 7 runs of 0.2 ms moved by 30 % between benchmark runs here.
MIN_SAMPLED = 0.05
MAX_FAST_REPEATS = 500


def measure(call, budget: float, max_repeats: int, jit: bool) -> dict:
    """Run ``call()`` (returns a result dict); add seconds (median), repeats, warmup_seconds.

    The warm-up run loads compiled code and caches. Runs repeat ``max_repeats`` times
    within ``budget``, and fast runs go on until ``MIN_SAMPLED`` seconds are sampled. A
    run that did not reach the end is not repeated. A non-compiled peer whose warm-up was slow keeps the warm-up time as
    its only sample (re-running would only cost time).
    """
    t0 = time.perf_counter()
    first = call()
    warm = time.perf_counter() - t0
    if first["status"] != "ok" or (warm > SLOW_PLAIN and not jit):
        return dict(first, seconds=warm, repeats=1, warmup_seconds=warm)
    samples, last = [], first
    spent = 0.0
    def more():
        if not samples:
            return True
        if spent >= budget or warm > SLOW:
            return False
        return len(samples) < max_repeats or (spent < MIN_SAMPLED and len(samples) < MAX_FAST_REPEATS)

    while more():
        t0 = time.perf_counter()
        last = call()
        dt = time.perf_counter() - t0
        samples.append(dt)
        spent += dt
        if last["status"] != "ok":
            return dict(last, seconds=dt, repeats=len(samples), warmup_seconds=warm)
    return dict(last, seconds=statistics.median(samples), repeats=len(samples),
                warmup_seconds=warm)
