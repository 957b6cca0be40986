"""Run the benchmark suite: ``python -m bench.run --quick`` (about 3 min) or ``--full``.

Writes bench/results/latest.json (machine + one record per problem, tolerance and
solver), bench/results/latest.md (the tables printed at the end) and one
work-precision PNG per problem. See docs/benchmarks.md.
"""
from __future__ import annotations

from pathlib import Path

from engine.cache import configure

# One numba cache folder per engine source version, before anything imports numba
# (numba checks a cached function only against its own file: a stale entry can run
# old code of another engine module).
configure(Path(__file__).resolve().parent.parent / "var" / "numba-cache")

import argparse  # noqa: E402
import datetime as dt  # noqa: E402
import json  # noqa: E402
import os  # noqa: E402
import platform  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402

from bench import matching, peers as P, problems as PR, report, sweep  # noqa: E402
from bench.references import reference  # noqa: E402
from bench.timing import measure  # noqa: E402

RESULTS = Path(__file__).resolve().parent / "results"
QUICK_RTOLS = (1e-6,)
FULL_RTOLS = (1e-3, 1e-4, 1e-5, 1e-6, 1e-7, 1e-8, 1e-9, 1e-10)


def machine() -> dict:
    import numba
    import scipy
    cpu = platform.processor() or platform.machine()
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    info = {"cpu": cpu, "cores": os.cpu_count(), "platform": platform.platform(),
            "python": platform.python_version(), "numpy": np.__version__,
            "scipy": scipy.__version__, "numba": numba.__version__,
            "date": dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds")}
    try:
        import sksundae
        info["scikit-sundae"] = sksundae.__version__
    except Exception as exc:  # optional peer
        info["scikit-sundae"] = f"unavailable: {type(exc).__name__}: {exc}"
    return info


def _record(problem, rtol, peer, res, ref) -> dict:
    y = res.get("y")
    d = matching.digits(y, ref["y"], problem.floor) if (y is not None and ref) else None
    rec = {"problem": problem.name, "n": problem.n, "rtol": rtol, "atol": problem.atol(rtol),
           "solver": peer.label, "status": res["status"], "seconds": res.get("seconds"),
           "digits": d, "steps": res.get("steps"), "nfev": res.get("nfev"),
           "njev": res.get("njev"), "nlu": res.get("nlu"), "repeats": res.get("repeats", 0),
           "warmup_seconds": res.get("warmup_seconds"), "message": res.get("message", "")}
    return rec


def run_problem(problem, rtols, peers, cap, budget, reps, log) -> tuple[list, dict]:
    try:
        ref = reference(problem, log)
    except Exception as exc:  # no reference: runs are timed but carry no digits
        log(f"  reference for {problem.name} unavailable: {exc}")
        ref = None
    records, stopped = [], {}
    for rtol in (problem.rtols if (problem.rtols and len(rtols) > 1) else rtols):
        for peer in peers:
            why = peer.reason if not peer.available else P.applicable(peer, problem)
            if why:
                res = {"status": "unavailable", "message": why}
            elif peer.label in stopped:
                res = {"status": "timeout", "message": stopped[peer.label]}
            else:
                def call(peer=peer, rtol=rtol):
                    try:
                        return peer.run(problem, rtol, cap)
                    except Exception as exc:  # a peer's crash is a record, not an abort
                        return {"status": "failed", "message": f"{type(exc).__name__}: {exc}"}
                # compiled solvers (the engine, and peers with numba right-hand sides) may spend
                # their first call compiling or loading code; any other slow first run is the sample
                res = measure(call, budget, reps, jit=peer.family in ("engine", "odeint", "cvode"))
                if res["status"] == "timeout" and peer.label != "engine/auto":
                    # cost grows as rtol shrinks; engine/auto is always run at every rtol
                    stopped[peer.label] = f"not run: timed out at rtol {rtol:g}"
            rec = _record(problem, rtol, peer, res, ref)
            records.append(rec)
            log(f"  {problem.name:15s} {rtol:7.0e} {peer.label:22s} {rec['status']:11s} "
                f"{_fmt(rec['seconds'])} s  digits {_fmt(rec['digits'])}")
    summary = {"problem": problem.name, "n": problem.n, "source": problem.source,
               "t_end": problem.t_end, "stiff": problem.stiff, "floor": problem.floor,
               "atol_scale": problem.atol_scale, "published_note": problem.published_note,
               "machine_code": PR.machine_code_info(problem)}
    if ref:
        summary.update(reference_method=ref["method"], reference_rtol=ref["rtol"],
                       reference_seconds=ref.get("seconds"),
                       reference_y=[float(v) for v in ref["y"]] if problem.n <= 64 else None,
                       published_vs_reference_digits=ref.get("published_digits"))
    return records, summary


def warm_engine(log) -> None:
    """Compile (or load from the numba cache) every engine method before any run is timed.

    After a change to the engine's sources the first call compiles for tens of seconds;
    inside a timed run that would show up as a wall-time limit.
    """
    from engine.integrate import METHODS
    problem = PR.build("hires")
    started = time.perf_counter()
    for method in METHODS:
        P.engine_run(method)(problem, 1e-6, 900.0)
    log(f"engine warm-up (compile or cache load): {time.perf_counter() - started:.1f} s")


def _fmt(x):
    return "-" if x is None else f"{x:.3g}"


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    mode = ap.add_mutually_exclusive_group()
    mode.add_argument("--quick", action="store_true", help="three small stiff problems at rtol 1e-6")
    mode.add_argument("--full", action="store_true", help="every problem at rtol 1e-3 ... 1e-10")
    ap.add_argument("--problems", help="comma-separated subset of " + ",".join(PR.NAMES))
    ap.add_argument("--cap", type=float, help="wall-time cap per run in seconds")
    ap.add_argument("--no-service", action="store_true", help="skip the service figures")
    ap.add_argument("--out", default=str(RESULTS), help="results directory")
    args = ap.parse_args(argv)
    quick = not args.full
    names = args.problems.split(",") if args.problems else (PR.QUICK if quick else PR.NAMES)
    rtols = QUICK_RTOLS if quick else FULL_RTOLS
    cap = args.cap or (5.0 if quick else 10.0)
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    started = time.perf_counter()

    def log(msg):
        print(msg, flush=True)

    peers = P.all_peers()
    warm_engine(log)
    for p in peers:
        if not p.available:
            log(f"{p.label}: unavailable: {p.reason}")
    records, problems = [], []
    for name in names:
        problem = PR.build(name)
        log(f"{name}: n={problem.n}, t_end={problem.t_end:g}")
        recs, summary = run_problem(problem, rtols, peers, cap, 1.0 if quick else 0.4,
                                    15 if quick else 7, log)
        records += recs
        problems.append(summary)
    result = {"mode": "quick" if quick else "full", "machine": machine(), "cap_seconds": cap,
              "rtols": list(rtols), "problems": problems, "records": records}
    result["sweep"] = sweep.robertson_sweep(members=1000 if quick else 5000, cap=cap)
    log(f"sweep: {result['sweep']}")
    if not args.no_service:
        from bench import service_bench
        result["service"] = service_bench.run(quick=quick, log=log)
    result["ratios"] = report.ratios(result)
    result["elapsed_seconds"] = time.perf_counter() - started
    (out / "latest.json").write_text(json.dumps(report.json_safe(result), indent=1))
    text = report.markdown(result)
    (out / "latest.md").write_text(text)
    for name in names:
        report.plot(result, name, out)
    print(text)
    log(f"done in {result['elapsed_seconds']:.0f} s; results in {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
