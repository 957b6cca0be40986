"""``stifflane batch submit|watch|table|stats|list|cancel``: sweeps over the API."""
from __future__ import annotations

import json
import sys
from pathlib import Path

from cli.common import (JOB_NOT_SUCCEEDED, OK, add_connection_args, client_module, command,
                        make_client, print_caution)
from cli.report import table


def _progress_line(view: dict) -> str:
    p = view.get("progress") or {}
    rate = p.get("members_per_second")
    return (f"{view['id']}  {view['state']}  {p.get('succeeded', 0)} ok, {p.get('failed', 0)} failed, "
            f"{p.get('remaining', 0)} left of {p.get('total', 0)}"
            + (f", {rate:.3g} members/s" if rate else ""))


def _end(client, view: dict, out: str | None, fmt: str | None) -> int:
    print(_progress_line(view), file=sys.stderr)
    if out:
        fmt = fmt or Path(out).suffix.lstrip(".").lower() or "csv"
        Path(out).write_bytes(client.batch_table_bytes(view["id"], fmt))
        print(f"table saved to {out}", file=sys.stderr)
        print_caution()
    return OK if view["state"] == "succeeded" else JOB_NOT_SUCCEEDED


def cmd_submit(args) -> int:
    client = make_client(args)
    src = sys.stdin.read() if args.spec == "-" else Path(args.spec)
    b = client.submit_batch(client_module().load_spec(src))
    print(b.view["id"])
    if not (args.wait or args.out):
        print(f"{b.view.get('members', '?')} members; watch with: stifflane batch watch {b.view['id']}",
              file=sys.stderr)
        return OK
    view = client.wait_batch(b.view["id"], timeout=args.timeout, progress=not args.quiet).view
    return _end(client, view, args.out, args.format)


def cmd_watch(args) -> int:
    client = make_client(args)
    view = client.wait_batch(args.batch_id, timeout=args.timeout, progress=not args.quiet).view
    return _end(client, view, args.out, args.format)


def cmd_table(args) -> int:
    client = make_client(args)
    fmt = args.format or (Path(args.out).suffix.lstrip(".").lower() if args.out else "csv") or "csv"
    data = client.batch_table_bytes(args.batch_id, fmt)
    if args.out:
        Path(args.out).write_bytes(data)
        print(f"table saved to {args.out}", file=sys.stderr)
    else:
        sys.stdout.buffer.write(data)
        sys.stdout.flush()
    print_caution()
    return OK


def cmd_stats(args) -> int:
    stats = make_client(args).batch_statistics(args.batch_id)
    if args.json:
        print(json.dumps(stats, indent=2))
        return OK
    print(f"{stats['rows']} members finished; outcomes: "
          + ", ".join(f"{k} {v}" for k, v in (stats.get("outcomes") or {}).items()))
    rows = [[name, s.get("count"), s.get("mean"), s.get("std"), s.get("min"), s.get("q05"), s.get("q50"),
             s.get("q95"), s.get("max")] for name, s in (stats.get("summaries") or {}).items()]
    print(table(rows, ["summary", "n", "mean", "std", "min", "5%", "median", "95%", "max"]))
    print_caution()
    return OK


def cmd_list(args) -> int:
    views = [b.view for b in make_client(args).batches(limit=min(args.limit, 200))][:args.limit]
    for v in views:
        print(_progress_line(v) + f"  {v.get('label') or ''}")
    return OK


def cmd_cancel(args) -> int:
    print(_progress_line(make_client(args).cancel_batch(args.batch_id).view))
    return OK


def register(sub) -> None:
    top = sub.add_parser("batch", help="sweeps: submit, watch, table, stats, list, cancel",
                         description="Batches run one base job many times with varied parameters or "
                                     "initial values, and tabulate summaries of every member.")
    bs = top.add_subparsers(dest="batch_command", required=True)

    p = bs.add_parser("submit", help="submit a batch spec (JSON file, or - for stdin)")
    p.add_argument("spec")
    p.add_argument("--wait", action="store_true", help="wait for the batch to finish")
    p.add_argument("-o", "--out", help="save the summary table here (implies --wait)")
    p.add_argument("--format", choices=("csv", "json", "npz"))
    p.add_argument("--timeout", type=float)
    p.add_argument("-q", "--quiet", action="store_true")
    add_connection_args(p)
    command(p, cmd_submit, """  stifflane batch submit sweep.json
  stifflane batch submit sweep.json --wait -o sweep.csv""")

    p = bs.add_parser("watch", help="follow a batch with a progress bar")
    p.add_argument("batch_id")
    p.add_argument("-o", "--out", help="save the summary table when it ends")
    p.add_argument("--format", choices=("csv", "json", "npz"))
    p.add_argument("--timeout", type=float)
    p.add_argument("-q", "--quiet", action="store_true")
    add_connection_args(p)
    command(p, cmd_watch, """  stifflane batch watch 0661b...9c2 -o sweep.csv""")

    p = bs.add_parser("table", help="the summary table (CSV on stdout, or -o FILE)")
    p.add_argument("batch_id")
    p.add_argument("-o", "--out")
    p.add_argument("--format", choices=("csv", "json", "npz"))
    add_connection_args(p)
    command(p, cmd_table, """  stifflane batch table 0661b...9c2 > sweep.csv
  stifflane batch table 0661b...9c2 -o sweep.npz""")

    p = bs.add_parser("stats", help="statistics of each summary (mean, spread, quantiles)")
    p.add_argument("batch_id")
    p.add_argument("--json", action="store_true")
    add_connection_args(p)
    command(p, cmd_stats, """  stifflane batch stats 0661b...9c2""")

    p = bs.add_parser("list", help="list your batches")
    p.add_argument("--limit", type=int, default=20)
    add_connection_args(p)
    command(p, cmd_list, """  stifflane batch list""")

    p = bs.add_parser("cancel", help="cancel a batch (members not yet run are skipped)")
    p.add_argument("batch_id")
    add_connection_args(p)
    command(p, cmd_cancel, """  stifflane batch cancel 0661b...9c2""")
