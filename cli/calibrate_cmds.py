"""``stifflane calibrate submit|show|result|list|cancel``: parameter estimation over the API."""
from __future__ import annotations

import json
import sys
from pathlib import Path

from cli.common import (JOB_NOT_SUCCEEDED, OK, add_connection_args, client_module, command, make_client,
                        print_caution)
from cli.report import table

TABLES = ("parameters", "starts", "residuals", "correlation")


def _progress_line(view: dict) -> str:
    p = view.get("progress") or {}
    best = p.get("best_sum_of_squares")
    line = (f"{view['id']}  {view['state']}  {p.get('done', 0)} done, {p.get('failed', 0)} failed, "
            f"{p.get('remaining', 0)} left of {p.get('total', 0)} starts")
    if isinstance(best, (int, float)):
        line += f", best sum of squares {best:.6g}"
    if p.get("failed_solves"):
        line += f", {p['failed_solves']} failed solves"
    if view.get("message") and view.get("state") != "succeeded":
        line += f"  ({view['message']})"
    return line


def _parameter_table(estimate: dict) -> str:
    rows = [[u.get("name"), u.get("estimate"), u.get("standard_error"), *(u.get("ci95") or [None, None]),
             "yes" if u.get("at_bound") else ""] for u in estimate.get("unknowns", [])]
    return table(rows, ["unknown", "estimate", "std error", "95% low", "95% high", "at bound"])


def _print_estimate(estimate: dict) -> None:
    print(_parameter_table(estimate))
    print(f"sum of squares {estimate.get('sum_of_squares')}, {estimate.get('points')} points, "
          f"{estimate.get('dof')} degrees of freedom, AIC {estimate.get('aic')}, BIC {estimate.get('bic')}")
    for w in estimate.get("warnings") or []:
        print(f"warning: {w}")


def _save(client, cal_id: str, out: str, fmt: str | None, which: str) -> None:
    fmt = fmt or ("json" if Path(out).suffix.lower() == ".json" else "csv")
    Path(out).write_bytes(client.calibration_bytes(cal_id, fmt, which))
    print(f"{'estimate' if fmt == 'json' else which + ' table'} saved to {out}", file=sys.stderr)


def cmd_submit(args) -> int:
    client = make_client(args)
    src = sys.stdin.read() if args.spec == "-" else Path(args.spec)
    created = client.submit_calibration(client_module().load_spec(src))
    print(created["id"])
    data = created.get("data") or {}
    print(f"{created.get('starts')} starts over {data.get('points', '?')} measured values"
          + (f" ({data['skipped_cells']} empty cells skipped)" if data.get("skipped_cells") else ""),
          file=sys.stderr)
    if not (args.wait or args.out):
        print(f"follow with: stifflane calibrate show {created['id']}", file=sys.stderr)
        return OK
    view = client.wait_calibration(created["id"], timeout=args.timeout, progress=not args.quiet)
    print(_progress_line(view), file=sys.stderr)
    if view["state"] != "succeeded":
        return JOB_NOT_SUCCEEDED
    _print_estimate(client.calibration_result(view["id"]))
    if args.out:
        _save(client, view["id"], args.out, args.format, args.table)
    print_caution()
    return OK


def cmd_show(args) -> int:
    client = make_client(args)
    view = client.calibration(args.calibration_id)
    if args.json:
        print(json.dumps(view, indent=2))
        return OK
    print(_progress_line(view))
    print(f"stage {view.get('stage')}; unknowns {', '.join(view.get('unknowns') or [])}; "
          f"{(view.get('data') or {}).get('points', '?')} measured values")
    if view["state"] == "succeeded":
        _print_estimate(client.calibration_result(view["id"]))
        print_caution()
    return OK if view["state"] in ("succeeded", "queued", "running") else JOB_NOT_SUCCEEDED


def cmd_result(args) -> int:
    client = make_client(args)
    if args.out:
        _save(client, args.calibration_id, args.out, args.format, args.table)
    else:
        fmt = args.format or "csv"
        sys.stdout.buffer.write(client.calibration_bytes(args.calibration_id, fmt, args.table))
        sys.stdout.flush()
    print_caution()
    return OK


def cmd_list(args) -> int:
    for v in list(make_client(args).calibrations(limit=min(args.limit, 200)))[:args.limit]:
        print(_progress_line(v) + f"  {v.get('label') or ''}")
    return OK


def cmd_cancel(args) -> int:
    print(_progress_line(make_client(args).cancel_calibration(args.calibration_id)))
    return OK


def register(sub) -> None:
    top = sub.add_parser("calibrate", help="parameter estimation: submit, show, result, list, cancel",
                         description="Calibrations fit a model's parameters (or initial values) to "
                                     "measurements from one or more experiments, from many starts "
                                     "run on the workers (docs/calibration.md).")
    cs = top.add_subparsers(dest="calibrate_command", required=True)

    p = cs.add_parser("submit", help="submit a calibration spec (JSON file, or - for stdin)")
    p.add_argument("spec")
    p.add_argument("--wait", action="store_true", help="wait for the estimate and print it")
    p.add_argument("-o", "--out", help="save the estimate here: .json for all of it, else a CSV table (implies --wait)")
    p.add_argument("--format", choices=("csv", "json"))
    p.add_argument("--table", choices=TABLES, default="parameters", help="which CSV table (default parameters)")
    p.add_argument("--timeout", type=float)
    p.add_argument("-q", "--quiet", action="store_true")
    add_connection_args(p)
    command(p, cmd_submit, """  stifflane calibrate submit examples/calibrations/tarnwhistle_isomerisation.json --wait
  stifflane calibrate submit fit.json -o estimate.json""")

    p = cs.add_parser("show", help="a calibration's state and progress, and its estimate once done")
    p.add_argument("calibration_id")
    p.add_argument("--json", action="store_true", help="the view as JSON")
    add_connection_args(p)
    command(p, cmd_show, """  stifflane calibrate show 0661b...9c2""")

    p = cs.add_parser("result", help="the estimate: a CSV table on stdout, or -o FILE (.json: all of it)")
    p.add_argument("calibration_id")
    p.add_argument("-o", "--out")
    p.add_argument("--format", choices=("csv", "json"))
    p.add_argument("--table", choices=TABLES, default="parameters")
    add_connection_args(p)
    command(p, cmd_result, """  stifflane calibrate result 0661b...9c2
  stifflane calibrate result 0661b...9c2 --table starts -o starts.csv
  stifflane calibrate result 0661b...9c2 -o estimate.json""")

    p = cs.add_parser("list", help="list your calibrations")
    p.add_argument("--limit", type=int, default=20)
    add_connection_args(p)
    command(p, cmd_list, """  stifflane calibrate list""")

    p = cs.add_parser("cancel", help="cancel a calibration (starts not yet run are skipped)")
    p.add_argument("calibration_id")
    add_connection_args(p)
    command(p, cmd_cancel, """  stifflane calibrate cancel 0661b...9c2""")
