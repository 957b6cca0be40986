"""Peak memory of one solve, each in a fresh process: the figure a README may quote.

    python -m bench.memory --problem brusselator128 --rtol 1e-6 engine/auto cvode+numba

For each solver a child process imports everything, records its resident memory, solves once
(the model prepared first, as a worker does), and reports its peak resident memory
(``ru_maxrss``) and the growth over the baseline; the table goes to stdout and, with --json,
to a file beside the benchmark results.
"""
from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import time


def _rss_mb() -> float:
    with open("/proc/self/statm") as f:
        return int(f.read().split()[1]) * resource.getpagesize() / 2**20


def child(problem_name: str, rtol: float, label: str, cap: float) -> dict:
    from bench import peers as P, problems as PR
    problem = PR.build(problem_name)
    peer = next(p for p in P.all_peers() if p.label == label)
    if not peer.available:
        return {"solver": label, "status": "unavailable", "message": peer.reason}
    PR.prepare_problem(problem)  # the model prepared first, outside the measured growth
    baseline = _rss_mb()
    started = time.perf_counter()
    res = peer.run(problem, rtol, cap)
    seconds = time.perf_counter() - started
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    return {"solver": label, "status": res["status"], "seconds": seconds, "baseline_mb": baseline,
            "peak_mb": peak, "growth_mb": peak - baseline, "message": res.get("message", "")}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--problem", default="brusselator128")
    ap.add_argument("--rtol", type=float, default=1e-6)
    ap.add_argument("--cap", type=float, default=120.0)
    ap.add_argument("--json", help="write the records here")
    ap.add_argument("--child", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("solvers", nargs="*", default=["engine/auto", "cvode+numba"])
    args = ap.parse_args(argv)
    if args.child:
        print(json.dumps(child(args.problem, args.rtol, args.solvers[0], args.cap)))
        return 0
    rows = []
    for label in args.solvers:
        out = subprocess.run([sys.executable, "-m", "bench.memory", "--child", "--problem", args.problem,
                              "--rtol", str(args.rtol), "--cap", str(args.cap), label],
                             capture_output=True, text=True)
        rows.append(json.loads(out.stdout.strip().splitlines()[-1]) if out.returncode == 0 else
                    {"solver": label, "status": "failed", "message": out.stderr[-300:]})
    print(f"{args.problem}, rtol {args.rtol:g}: peak resident memory of one solve in a fresh process")
    print("| solver | status | seconds (first solve in the process) | baseline MB | peak MB | growth MB |")
    print("|---|---|---|---|---|---|")
    for r in rows:
        print(f"| {r['solver']} | {r['status']} | {r.get('seconds', 0):.2f} | {r.get('baseline_mb', 0):.0f} "
              f"| {r.get('peak_mb', 0):.0f} | {r.get('growth_mb', 0):.0f} |")
    if args.json:
        with open(args.json, "w") as f:
            json.dump({"problem": args.problem, "rtol": args.rtol, "records": rows}, f, indent=1)
    return 0


if __name__ == "__main__":
    sys.exit(main())
