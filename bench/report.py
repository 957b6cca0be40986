"""Results into words and pictures: JSON-safe dict, markdown tables, ratios, plots."""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from bench import matching

TABLE_RTOLS = (1e-3, 1e-6, 1e-9)
SMALL_STIFF = ("robertson", "hires", "vanderpol")
NON_STIFF = ("arenstorf", "lorenz")


def json_safe(x):
    """Plain JSON types only: arrays to lists, NaN and infinity to None."""
    if isinstance(x, dict):
        return {str(k): json_safe(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [json_safe(v) for v in x]
    if isinstance(x, np.ndarray):
        return json_safe(x.tolist())
    if isinstance(x, (np.integer,)):
        return int(x)
    if isinstance(x, (float, np.floating)):
        return float(x) if math.isfinite(x) else None
    return x


def _of(records, problem, solver):
    return [r for r in records if r["problem"] == problem and r["solver"] == solver]


def _compare(records, problem, base, peer, anchor_rtol=1e-6):
    """(time ratio peer/base, digits, basis) at base's digits at ``anchor_rtol``.

    With several tolerances per solver the peer's time is interpolated to the same
    digits ("matched digits"); with one tolerance only, runs at the same rtol are
    compared ("same rtol") and the digits of both are shown.
    """
    b, p = _of(records, problem, base), _of(records, problem, peer)
    anchor = [r for r in b if r["rtol"] == anchor_rtol and r["status"] == "ok"]
    if not anchor or not p:
        return None, None, "no successful base run"
    d = anchor[0]["digits"]
    if d is not None and len({r["rtol"] for r in p}) > 1:
        ratio = matching.speedup(b, p, d)
        if ratio is not None:
            return ratio, d, "matched digits"
    same = [r for r in p if r["rtol"] == anchor_rtol and r["status"] == "ok"]
    if same and same[0]["seconds"]:
        return same[0]["seconds"] / anchor[0]["seconds"], d, (
            f"same rtol (peer digits {_f(same[0]['digits'])})")
    status = p[0]["status"] if p else "missing"
    return None, d, f"peer has no comparable run ({status})"


def ratios(result: dict) -> list[dict]:
    recs = result["records"]
    have = {r["problem"] for r in recs}
    rows = []

    def add(target, problem, base, peer, goal, faster: bool):
        if problem not in have:
            return
        ratio, d, basis = _compare(recs, problem, base, peer)
        value = ratio if faster else (None if ratio is None else 1.0 / ratio)
        met = None if value is None else (value >= goal if faster else value <= goal)
        rows.append({"target": target, "problem": problem, "base": base, "peer": peer,
                     "digits": d, "basis": basis, "value": value, "goal": goal,
                     "kind": "speedup >=" if faster else "time ratio <=", "met": met})

    for prob in SMALL_STIFF:
        add("auto >= 6x odeint+numba", prob, "engine/auto", "odeint+numba", 6.0, True)
        for m in ("Radau", "BDF"):
            add(f"auto >= 200x solve_ivp/{m}", prob, "engine/auto", f"solve_ivp/{m}", 200.0, True)
    for prob in NON_STIFF:
        add("auto within 1.3x of dormand_prince_54", prob, "engine/auto", "engine/dormand_prince_54", 1.3, False)
    add("auto <= 0.5x CVODE time", "brusselator32", "engine/auto", "cvode+numba", 0.5, False)
    sw = result.get("sweep")
    if sw:
        v = sw.get("solves_per_second")
        rows.append({"target": "Robertson sweep >= 2500 solves/s/core", "problem": "robertson",
                     "base": "engine/auto", "peer": "-", "digits": None, "basis": "sweep",
                     "value": v, "goal": 2500.0, "kind": "solves/s >=",
                     "met": None if v is None else v >= 2500.0})
    return rows


def _f(x, spec=".3g"):
    return "-" if x is None else format(x, spec)


def _secs(x):
    if x is None:
        return "-"
    return f"{x * 1e3:.3g} ms" if x < 1 else f"{x:.3g} s"


def _tier(info) -> str:
    """The Problems table's note on how the engine evaluated the model (engine.kernels.native)."""
    if not info:
        return "-"
    if info.get("used"):
        return f"machine code (built or loaded in {info['seconds']:.2f} s, untimed)"
    return f"interpreter ({info.get('reason', '')})"


def table(records, problem, rtol) -> list[str]:
    rows = [r for r in records if r["problem"] == problem and r["rtol"] == rtol]
    if not rows:
        return []
    out = [f"#### {problem}, rtol {rtol:g} (atol {rows[0]['atol']:g})", "",
           "| solver | median time | digits | steps | RHS evals | LU | status |",
           "|---|---:|---:|---:|---:|---:|---|"]
    for r in rows:
        status = r["status"] if r["status"] == "ok" else f"{r['status']}: {r['message'][:80]}"
        out.append(f"| {r['solver']} | {_secs(r['seconds'] if r['status'] == 'ok' else None)} "
                   f"| {_f(r['digits'], '.1f')} | {_f(r['steps'], 'd')} | {_f(r['nfev'], 'd')} "
                   f"| {_f(r['nlu'], 'd')} | {status} |")
    return out + [""]


def markdown(result: dict) -> str:
    m = result["machine"]
    lines = [f"## Benchmark results ({result['mode']})", "",
             f"{m['date']} on {m['cpu']} ({m['cores']} cores), Python {m['python']}, "
             f"numpy {m['numpy']}, scipy {m['scipy']}, numba {m['numba']}, "
             f"scikit-sundae {m.get('scikit-sundae')}; cap {result['cap_seconds']:g} s per run; "
             f"elapsed {result.get('elapsed_seconds', 0):.0f} s.", "", "### Targets", "",
             "| target | problem | basis | digits | value | goal | met |", "|---|---|---|---:|---:|---:|---|"]
    for r in result.get("ratios", []):
        met = {True: "yes", False: "**no**", None: "n/a"}[r["met"]]
        lines.append(f"| {r['target']} | {r['problem']} | {r['basis']} | {_f(r['digits'], '.1f')} "
                     f"| {_f(r['value'])} | {r['kind']} {r['goal']:g} | {met} |")
    lines += ["", "### Problems", "", "| problem | n | source | reference | published vs reference (digits) "
              "| engine evaluates by |", "|---|---:|---|---|---:|---|"]
    for p in result["problems"]:
        ref = f"SciPy {p.get('reference_method', '-')} rtol {p.get('reference_rtol', '-')}"
        lines.append(f"| {p['problem']} | {p['n']} | {p['source']} | {ref} "
                     f"| {_f(p.get('published_vs_reference_digits'), '.1f')} | {_tier(p.get('machine_code'))} |")
    sw = result.get("sweep")
    if sw:
        lines += ["", f"Sweep: {sw['members']} Robertson solves in {sw['seconds']:.2f} s = "
                      f"**{sw['solves_per_second']:.0f} solves/s** on one core, "
                      f"{_f(sw.get('digits'), '.1f')} digits ({sw['note']})."]
        od = sw.get("odeint") or {}
        if od.get("members"):
            lines += [f"Same sweep with {od['note']}: {od['members']} solves in {od['seconds']:.2f} s = "
                      f"**{od['solves_per_second']:.0f} solves/s** at rtol {od['rtol']:g}, "
                      f"{_f(od.get('digits'), '.1f')} digits (the loosest rtol matching the engine's)."]
        elif od:
            lines += [f"odeint sweep: {od.get('note')}"]
        lines += [""]
    svc = result.get("service")
    if svc:
        lines += ["### Service", ""] + [f"- {k}: {v}" for k, v in svc.items()] + [""]
    lines += ["### Tables", ""]
    probs = [p["problem"] for p in result["problems"]]
    for rtol in [r for r in result["rtols"] if any(math.isclose(r, t) for t in TABLE_RTOLS)]:
        for prob in probs:
            lines += table(result["records"], prob, rtol)
    return "\n".join(lines) + "\n"


def plot(result: dict, problem: str, out: Path) -> Path | None:
    """Work-precision diagram (digits vs seconds, log time) for one problem."""
    try:
        import matplotlib
        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except Exception:
        return None
    recs = [r for r in result["records"] if r["problem"] == problem]
    fig, ax = plt.subplots(figsize=(7, 5))
    drawn = 0
    for solver in dict.fromkeys(r["solver"] for r in recs):
        pts = matching.curve([r for r in recs if r["solver"] == solver])
        if not pts:
            continue
        d, lt = zip(*sorted(pts))
        style = "-o" if solver.startswith("engine") else "--."
        ax.plot([10 ** v for v in lt], d, style, label=solver, markersize=4)
        drawn += 1
    if not drawn:
        plt.close(fig)
        return None
    ax.set_xscale("log")
    ax.set_xlabel("median wall time per solve [s]")
    ax.set_ylabel("digits at the end point")
    ax.set_title(f"{problem}: work-precision")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=7, loc="best")
    path = Path(out) / f"{problem}.png"
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return path
