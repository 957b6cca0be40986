"""Reference end values: SciPy at tight tolerance, computed once and cached on disk.

The cache (bench/results/references.json) is keyed by the problem name, the
SHA-256 of its model, the end time, the method and the tolerance, so a changed
model is recomputed. Where published values exist (problem.published) they are
compared with the recomputed ones and both are kept in the results.
"""
from __future__ import annotations

import hashlib
import json
import time
from pathlib import Path

import numpy as np
from scipy.integrate import solve_ivp

from bench.matching import digits
from bench.problems import Problem, prepare_problem

CACHE = Path(__file__).resolve().parent / "results" / "references.json"
# Large problems' references (tens of thousands of values) stay out of git.
CACHE_LARGE = CACHE.with_name("references-large.json")
LARGE = 64
CAP_SECONDS = 600.0  # a reference that takes longer is reported missing (runs get no digits)


def _capped(f, cap):
    deadline = time.perf_counter() + cap

    def g(t, y):
        if time.perf_counter() > deadline:
            raise TimeoutError(f"reference solve passed {cap:g} s")
        return f(t, y)
    return g


def _key(problem: Problem, method: str) -> str:
    text = json.dumps(problem.model, sort_keys=True, separators=(",", ":"))
    digest = hashlib.sha256(text.encode()).hexdigest()[:16]
    return (f"{problem.name}:{digest}:{problem.t_end!r}:{method}:{problem.reference_rtol:g}"
            f":{_atol(problem):g}")


def _atol(problem: Problem) -> float:
    return min(problem.floor * 1e-6, 1e-12)


def _solve(problem: Problem, y0: np.ndarray):
    rtol = problem.reference_rtol
    atol = _atol(problem)
    if problem.jac is None:
        method, kw = "DOP853", {}
        rtol = max(rtol, 1e-13)
    else:
        method, kw = "Radau", {"jac": problem.jac}
        if problem.sparse:
            method = "BDF"  # sparse LU of real matrices; Radau's complex systems cost more
    started = time.perf_counter()
    f = _capped(problem.f, CAP_SECONDS)
    sol = solve_ivp(f, (0.0, problem.t_end), y0, method=method, rtol=rtol, atol=atol, **kw)
    if not sol.success:
        raise RuntimeError(f"reference solve failed for {problem.name}: {sol.message}")
    return method, sol.y[:, -1], time.perf_counter() - started


def _read(path: Path) -> dict:
    try:
        return json.loads(path.read_text())
    except (FileNotFoundError, json.JSONDecodeError):
        return {}


def reference(problem: Problem, log=print) -> dict:
    """{"y": end values, "method", "rtol", "seconds", "published", "published_digits"}."""
    y0 = np.array(prepare_problem(problem).y0)
    method = "DOP853" if problem.jac is None else ("BDF" if problem.sparse else "Radau")
    path = CACHE_LARGE if problem.n > LARGE else CACHE
    cache = _read(path)
    key = _key(problem, method)
    if key not in cache:
        log(f"computing the reference for {problem.name} with SciPy {method} "
            f"at rtol {problem.reference_rtol:g} (cached afterwards)")
        method, y, secs = _solve(problem, y0)
        cache = _read(path)
        cache[key] = {"y": [float(v) for v in y], "method": method,
                      "rtol": problem.reference_rtol, "seconds": secs}
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(json.dumps(cache, indent=1))
    ref = dict(cache[key])
    ref["y"] = np.array(ref["y"])
    if problem.published is not None:
        ref["published"] = problem.published
        ref["published_digits"] = digits(ref["y"], problem.published, problem.floor)
    return ref

