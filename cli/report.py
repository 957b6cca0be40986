"""``stifflane report``: a job's stiffness report as tables in the terminal."""
from __future__ import annotations

import json

from cli.common import JOB_NOT_SUCCEEDED, OK, add_connection_args, command, make_client


def _num(v) -> str:
    if v is None:
        return "-"
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        return str(v)
    if isinstance(v, int) or float(v).is_integer() and abs(v) < 1e12:
        return f"{int(v):,}"
    return f"{v:.4g}"


def table(rows: list[list], header: list[str] | None = None) -> str:
    """Plain aligned columns; numbers right-aligned."""
    cells = [[_num(c) if not isinstance(c, str) else c for c in r] for r in rows]
    if header:
        cells.insert(0, header)
    if not cells:
        return ""
    widths = [max(len(r[i]) for r in cells) for i in range(len(cells[0]))]
    numeric = [all(not isinstance(r[i], str) for r in rows) for i in range(len(widths))] if rows else []
    out = []
    for k, r in enumerate(cells):
        out.append("  ".join(c.rjust(w) if numeric and numeric[i] and not (header and k == 0) else c.ljust(w)
                             for i, (c, w) in enumerate(zip(r, widths))).rstrip())
        if header and k == 0:
            out.append("  ".join("-" * w for w in widths))
    return "\n".join(out)


def method_phases(rep: dict) -> list[list]:
    """[from t, to t, method] for each stretch between switches."""
    switches = rep.get("switches") or []
    history = rep.get("step_history") or {}
    if not switches:
        used = rep.get("methods_used") or []
        return [[None, rep.get("t_reached"), used[0]]] if len(used) == 1 else []
    start = history["t"][0] - history["h"][0] if history.get("t") else None
    rows, t0 = [], start
    for s in switches:
        rows.append([t0, s.get("t"), s.get("from", "")])
        t0 = s.get("t")
    rows.append([t0, rep.get("t_reached"), switches[-1].get("to", "")])
    return rows


def _tier(mc: dict | None) -> str | None:
    """How the worker evaluated the model (engine.kernels.native), in words."""
    if not mc:
        return None
    if mc.get("used"):
        why = f"; {mc['reason']}" if mc.get("reason") else ""
        return f"machine code ({_num(mc.get('seconds'))} s to build or load{why})"
    return f"interpreter ({mc.get('reason', '')})"


MAX_EVENT_ROWS = 50   # events listed in full; the rest are counted
MAX_EVENT_COLUMNS = 8  # states shown as columns; more go into one "name=value" column


def _sentence(text: str) -> str:
    text = (text or "").strip()
    return text if not text or text[-1] in ".!?" else text + "."


def _status(result: dict) -> list[str]:
    """How the run ended and whether the result is whole, in plain sentences."""
    state, outcome = result.get("state"), result.get("outcome")
    lines = []
    if state:
        lines.append(f"state: {state}" + (f" (outcome {outcome})" if outcome and outcome != state else ""))
    elif outcome:
        lines.append(f"outcome: {outcome}")
    if result.get("message"):
        lines.append(_sentence(result["message"][:1].upper() + result["message"][1:]))
    if result.get("partial"):
        reached, end = result.get("t_reached"), result.get("t_end")
        span = f"t = {_num(reached)}" + (f" of {_num(end)}" if end is not None else "")
        rows = len(result.get("times") or [])
        still = "so far, while the job runs" if state == "running" else "before the run stopped"
        lines.append(f"Partial result: solved up to {span} {still} ({rows} output times).")
    return lines


def _events(result: dict) -> str | None:
    events = result.get("events") or []
    if not events:
        return None
    names = list(events[0].get("states") or {})
    units = result.get("units") or {}
    labels = [f"{n} [{units[n]}]" if units.get(n) else n for n in names]
    shown = events[:MAX_EVENT_ROWS]
    if len(names) <= MAX_EVENT_COLUMNS:
        rows = [[e.get("name", ""), e.get("t"), *[(e.get("states") or {}).get(n) for n in names]] for e in shown]
        text = table(rows, ["event", "t", *labels])
    else:
        rows = [[e.get("name", ""), e.get("t"),
                 " ".join(f"{n}={_num(v)}" for n, v in (e.get("states") or {}).items())] for e in shown]
        text = table(rows, ["event", "t", "states"])
    if len(events) > len(shown):
        text += f"\n... and {len(events) - len(shown)} more (stifflane result ID --format json lists them all)"
    return "\nEvents\n" + text


def _units(result: dict) -> str | None:
    units = result.get("units") or {}
    if not units:
        return None
    return "\nUnits\n" + table([[name, unit] for name, unit in units.items()], ["name", "unit"])


def _ranking(result: dict) -> str | None:
    """Which parameters matter: per ranked output, its value and the parameters by |d ln output /
    d ln θ| (sensitivity.rank in the spec), reactions named beside their rate constants."""
    ranked = (result.get("sensitivity") or {}).get("ranking") or []
    if not ranked:
        return None
    parts = ["\nWhich parameters matter (normalised sensitivity d ln(output) / d ln θ, largest first)"]
    for row in ranked:
        summary = row.get("output", {}).get("summary")
        what = "delay" if summary == "crossing" else "value"
        where = f", t = {_num(row['t'])}" if row.get("t") is not None and summary != "crossing" else \
            (f", at t = {_num(row['t'])}" if row.get("t") is not None else "")
        parts.append(f"\n{row.get('label', '')}: {what} {_num(row.get('value'))}{where}")
        if row.get("note"):
            parts.append(f"  note: {_sentence(row['note'])}")
        entries = row.get("entries") or []
        if entries and any(e.get("normalised") is not None or e.get("raw") is not None for e in entries):
            rows = [[k, e["wrt"], ", ".join(e.get("reactions") or []) or "-", e.get("normalised"), e.get("raw")]
                    for k, e in enumerate(entries, start=1)]
            parts.append(table(rows, ["rank", "θ", "reactions", "normalised", "raw"]))
    return "\n".join(parts)


def format_report(result: dict) -> str:
    """The stiffness report of a result JSON as readable text."""
    rep = result.get("report") or {}
    parts = _status(result)
    counters = [("accepted steps", rep.get("accepted_steps")), ("rejected steps", rep.get("rejected_steps")),
                ("rhs evaluations", rep.get("rhs_evaluations")),
                ("Jacobian evaluations", rep.get("jacobian_evaluations")),
                ("LU factorisations", rep.get("lu_factorizations")),
                ("Newton iterations", rep.get("newton_iterations")),
                ("Newton failures", rep.get("newton_failures")), ("events found", rep.get("events_found")),
                ("method switches", rep.get("switch_count")),
                ("explicit steps needed (estimate)", rep.get("explicit_steps_needed")),
                ("conservation drift (max, relative)", rep.get("conservation_drift")),
                ("t reached", rep.get("t_reached")), ("solver seconds", rep.get("solve_seconds")),
                ("model evaluated by", _tier(rep.get("machine_code")))]
    parts.append("\nWork\n" + table([[k, v] for k, v in counters]))
    per, secs = rep.get("steps_per_method") or {}, rep.get("seconds_per_method") or {}
    if per:
        parts.append("\nMethods\n" + table([[m, per.get(m, 0), secs.get(m)] for m in per],
                                           ["method", "steps", "seconds"]))
    switches = rep.get("switches") or []
    phases = method_phases(rep)
    if len(phases) > 1:
        parts.append("\nMethod phases\n" + table(phases, ["from t", "to t", "method"]))
    if switches:
        rows = [[s.get("t"), s.get("from", ""), s.get("to", ""), s.get("h"), s.get("rho"),
                 s.get("explicit_step", s.get("h_stability")), s.get("reason", "")] for s in switches]
        parts.append("\nMethod switches\n" + table(rows, ["t", "from", "to", "h", "rho", "explicit step",
                                                          "reason"]))
        parts += [f"  - {s['explanation']}" for s in switches if s.get("explanation")]
    samples = rep.get("stiffness_samples") or []
    if samples:
        rows = [[s.get("t"), s.get("spectral_radius"), s.get("stiffness_ratio"), s.get("explicit_step")]
                for s in samples]
        parts.append("\nStiffness along the run\n" + table(rows, ["t", "spectral radius", "stiffness ratio",
                                                                  "explicit step"]))
    for extra in (_events(result), _units(result), _ranking(result)):
        if extra:
            parts.append(extra)
    for w in rep.get("warnings") or []:
        parts.append(f"warning: {w}")
    if result.get("caution"):
        parts.append("\n" + result["caution"])
    return "\n".join(parts)


def cmd_report(args) -> int:
    client = make_client(args)
    body = client.http.request("GET", f"/v1/jobs/{args.job_id}/result").json()
    if args.json:
        print(json.dumps(body.get("report") or {}, indent=2))
    else:
        print(format_report(body))
    return JOB_NOT_SUCCEEDED if body.get("partial") else OK


def register(sub) -> None:
    p = sub.add_parser("report", help="show a job's stiffness report as tables",
                       description="Show the solver's report of a job: how it ended, work counters, "
                                   "steps per method, method switches, stiffness samples, events (name, "
                                   "time, state values), units, and the parameters ranked by the outputs "
                                   "the spec names in sensitivity.rank. A failed, cancelled or running job's "
                                   "report covers the run so far and says the result is partial (exit "
                                   "code 1).")
    p.add_argument("job_id")
    p.add_argument("--json", action="store_true", help="print the report as JSON instead")
    add_connection_args(p)
    command(p, cmd_report, """  stifflane report 0661a...e7b
  stifflane report 0661a...e7b --json > report.json""")
