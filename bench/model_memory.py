"""Worker memory while preparing and solving many distinct models.

A long-running worker sees a new model with every job. This prepares and solves
N distinct models (an invented three-reaction network whose rate constants and one
expression change with each model, so every content hash is new) in one process, and
prints resident memory (RSS) at intervals and its growth over the second half.
Target: growth <= 10 % over the second half (memory flat: no code or data kept per model
beyond the bounded prepared-model cache and the bounded machine code).

With ``--machine-code always`` every model is also compiled to machine code
(engine.kernels.native), as a worker does for batches and repeated models: memory then grows
by the compiled code of each model until the per-process bound
(``engine.kernels.native.MAX_PER_PROCESS``), and must be flat after it.

Run: ``PYTHONPATH=. python -m bench.model_memory [--models 2000] [--machine-code always]``.
"""
from __future__ import annotations

import argparse
import json
import os
import time

import numpy as np

from engine.kernels import native
from engine.integrate import SolverOptions, integrate
from engine.model import prepare


def rss_mb() -> float:
    with open("/proc/self/statm") as f:
        return int(f.read().split()[1]) * os.sysconf("SC_PAGE_SIZE") / 2**20


def model(i: int, distinct_code: bool = False) -> dict:
    """Invented network A -> B -> C with a distinct derived quantity per model; with
    ``distinct_code`` also a ddt term whose constant differs per model, so every model
    compiles to different machine code (parameters alone do not: they are read at run time)."""
    out = {"title": f"Invented memory-test network {i}",
            "states": {"A": 1.0, "B": 0.0, "C": 0.0},
            "parameters": {"k1": 1.0 + i * 1e-3, "k2": 50.0 + i},
            "derived": {"marker": f"A*{i + 1} + B"},
            "reactions": [{"equation": "A -> B", "k": "k1"}, {"equation": "B -> C", "k": "k2"},
                          {"equation": "A + C -> B + C", "k": 0.01 * (i % 7 + 1)}]}
    if distinct_code:
        out["ddt"] = {"C": f"-{1e-6 * (i + 1)!r}*C"}
    return out


def main(argv=None) -> dict:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--models", type=int, default=2000)
    ap.add_argument("--machine-code", choices=native.MODES, default=native.NEVER)
    args = ap.parse_args(argv)
    compiled_at = None  # (models, rss) when the per-process bound was reached
    times = np.linspace(0.0, 10.0, 21)
    samples = []
    started = time.perf_counter()
    for i in range(args.models):
        m, info = native.choose(prepare(model(i, args.machine_code != native.NEVER)), args.machine_code)
        if compiled_at is None and args.machine_code != native.NEVER and not info["used"]:
            compiled_at = (i, round(rss_mb(), 1), info["reason"])
        sol = integrate(m.kernel, m.p, m.y0, (0.0, 10.0), times, SolverOptions(rtol=1e-6, atol=1e-10))
        assert sol.outcome == "succeeded", sol.message
        if i % max(args.models // 20, 1) == 0 or i == args.models - 1:
            samples.append((i + 1, round(rss_mb(), 1)))
    # flat from the second half on; with machine code, from the per-process bound on
    start = args.models // 2 if compiled_at is None else max(compiled_at[0], args.models // 2)
    half = [rss for n, rss in samples if n > start]
    growth = (half[-1] - half[0]) / half[0] if len(half) > 1 else 0.0
    out = {"models": args.models, "seconds": round(time.perf_counter() - started, 1),
           "rss_mb": samples, "second_half_growth_percent": round(100 * growth, 2),
           "target_percent": 10.0, "met": growth <= 0.10, "machine_code": args.machine_code,
           "machine_code_models": native.loaded(),
           "bound_reached_at": compiled_at}
    print(json.dumps(out, indent=1))
    return out


if __name__ == "__main__":
    main()
