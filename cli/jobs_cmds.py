"""Job commands: submit, watch, result, list, cancel (all through the client package)."""
from __future__ import annotations

import json
import sys
from pathlib import Path

from cli.common import JOB_NOT_SUCCEEDED, OK, add_connection_args, command, make_client, print_caution


def _print_view(view: dict) -> None:
    line = f"{view['id']}  {view['state']}"
    if view.get("outcome"):
        line += f"  {view['outcome']}: {view.get('message') or ''}"
    print(line)


def _finish(client, view: dict, out: str | None, fmt: str | None) -> int:
    if view["state"] != "succeeded":
        print(f"job {view['state']}: {view.get('outcome') or ''} {view.get('message') or ''}".rstrip(),
              file=sys.stderr)
        return JOB_NOT_SUCCEEDED
    if out:
        path = client.download(view["id"], out, fmt)
        print(f"result saved to {path}", file=sys.stderr)
        print_caution()
    return OK


def cmd_submit(args) -> int:
    client = make_client(args)
    spec = _load(args.spec)
    if args.label:
        spec["label"] = args.label
    job = client.submit(spec)
    print(job.id)
    if not (args.wait or args.out):
        print(f"watch it with: stifflane watch {job.id}", file=sys.stderr)
        return OK
    view = client.wait(job.id, timeout=args.timeout, progress=not args.quiet).view
    return _finish(client, view, args.out, args.format)


def _load(source: str) -> dict:
    from cli.common import client_module

    if source == "-":
        return client_module().load_spec(sys.stdin.read())
    return client_module().load_spec(Path(source))


def cmd_watch(args) -> int:
    client = make_client(args)
    view = client.wait(args.job_id, timeout=args.timeout, progress=not args.quiet).view
    _print_view(view)
    return _finish(client, view, args.out, args.format)


def cmd_result(args) -> int:
    client = make_client(args)
    if args.out:
        path = client.download(args.job_id, args.out, args.format)
        print(f"result saved to {path}", file=sys.stderr)
        print_caution()
        return OK
    fmt = args.format or "csv"
    data = client.result_bytes(args.job_id, fmt)
    if fmt == "npz" and sys.stdout.isatty():
        print("refusing to write binary .npz to a terminal; use -o FILE.npz", file=sys.stderr)
        return 2
    sys.stdout.buffer.write(data)
    sys.stdout.flush()
    print_caution()
    return OK


def cmd_list(args) -> int:
    client = make_client(args)
    rows = [j.view for j in client.jobs(state=args.state, limit=min(args.limit, 200),
                                        pages=max(1, -(-args.limit // 200)))][:args.limit]
    if args.json:
        print(json.dumps(rows, indent=2))
        return OK
    print(f"{'ID':28}  {'STATE':9}  {'PROG':>5}  {'METHOD':6}  {'CREATED':19}  LABEL")
    for v in rows:
        created = (v.get("created_at") or "")[:19].replace("T", " ")
        print(f"{v['id']:28}  {v['state']:9}  {100 * (v.get('progress') or 0):4.0f}%  "
              f"{v.get('method', ''):6}  {created:19}  {v.get('label') or ''}")
    return OK


def cmd_cancel(args) -> int:
    view = make_client(args).cancel(args.job_id).view
    _print_view(view)
    return OK


def register(sub) -> None:
    p = sub.add_parser("submit", help="submit a job spec (JSON file, or - for stdin)",
                       description="Submit a job spec. Prints the job id; --wait watches it with a "
                                   "progress bar, -o saves the result when it has succeeded.")
    p.add_argument("spec", help="path of a job spec JSON file, or - to read stdin")
    p.add_argument("--label", help="replace the spec's label")
    p.add_argument("--wait", action="store_true", help="wait for the job to finish")
    p.add_argument("-o", "--out", help="save the result here (implies --wait); format from the suffix")
    p.add_argument("--format", choices=("csv", "json", "npz"), help="result format (default: from -o suffix)")
    p.add_argument("--timeout", type=float, help="give up waiting after this many seconds")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress bar")
    add_connection_args(p)
    command(p, cmd_submit, """  stifflane submit examples/jobs/tarnwhistle_demo.json
  stifflane submit examples/jobs/tarnwhistle_demo.json --wait -o demo.csv
  stifflane --server http://lab-host:8750 submit spec.json   (or: STIFFLANE_URL=... stifflane submit spec.json)""")

    p = sub.add_parser("watch", help="follow a job with a progress bar until it ends",
                       description="Follow a job until it succeeds, fails or is cancelled.")
    p.add_argument("job_id")
    p.add_argument("-o", "--out", help="save the result here when it has succeeded")
    p.add_argument("--format", choices=("csv", "json", "npz"))
    p.add_argument("--timeout", type=float, help="give up after this many seconds (exit code 7)")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress bar")
    add_connection_args(p)
    command(p, cmd_watch, """  stifflane watch 0661a...e7b
  stifflane watch 0661a...e7b -o result.npz""")

    p = sub.add_parser("result", help="fetch a job's result (CSV to stdout, or to a file)",
                       description="Fetch a succeeded job's result: CSV on stdout by default; with "
                                   "-o the format follows the file suffix (.csv, .json, .npz).")
    p.add_argument("job_id")
    p.add_argument("-o", "--out", help="write to this file instead of stdout")
    p.add_argument("--format", choices=("csv", "json", "npz"))
    add_connection_args(p)
    command(p, cmd_result, """  stifflane result 0661a...e7b > demo.csv
  stifflane result 0661a...e7b -o demo.npz
  stifflane result 0661a...e7b --format json | python -m json.tool""")

    p = sub.add_parser("list", help="list your jobs, newest first",
                       description="List jobs, newest first.")
    p.add_argument("--state", choices=("queued", "running", "succeeded", "failed", "cancelled"))
    p.add_argument("--limit", type=int, default=20, help="how many (default 20)")
    p.add_argument("--json", action="store_true", help="print the job views as JSON")
    add_connection_args(p)
    command(p, cmd_list, """  stifflane list
  stifflane list --state running --limit 100""")

    p = sub.add_parser("cancel", help="cancel a queued or running job",
                       description="Ask for a job to be cancelled; a running job stops at its next step.")
    p.add_argument("job_id")
    add_connection_args(p)
    command(p, cmd_cancel, """  stifflane cancel 0661a...e7b""")
