"""Job commands: submit, watch, result, list, cancel (all through the client package)."""
from __future__ import annotations

import json
import sys
from pathlib import Path

from cli.common import JOB_NOT_SUCCEEDED, OK, add_connection_args, command, make_client, print_caution


def _ending(view: dict) -> str:
    from cli.common import client_module

    return client_module().ending(view)


def _print_view(view: dict) -> None:
    line = f"{view['id']}  {view['state']}"
    if view.get("outcome") or view.get("message"):
        line += f"  {_ending(view)}"
    print(line)


def partial_note(view: dict) -> str:
    """Where a failed, cancelled or running job's partial result ends, in words ("" if none)."""
    reached = (view.get("digest") or {}).get("t_reached")
    if view.get("state") == "running":
        return f"the job is still running ({100 * (view.get('progress') or 0):.0f}% of the span so far)"
    if reached is None:
        return ""
    return f"its partial result, up to t = {reached:.6g} ({100 * (view.get('progress') or 0):.0f}% of the span), is kept"


def _finish(client, view: dict, out: str | None, fmt: str | None) -> int:
    if view["state"] != "succeeded":
        print(_ending(view), file=sys.stderr)
        note = partial_note(view)
        if note and out:
            path = client.download(view["id"], out, fmt)
            print(f"{note}: saved to {path}", file=sys.stderr)
            print_caution()
        elif note:
            print(f"{note}: stifflane result {view['id']}", file=sys.stderr)
        return JOB_NOT_SUCCEEDED
    if out:
        path = client.download(view["id"], out, fmt)
        print(f"result saved to {path}", file=sys.stderr)
        print_caution()
    return OK


def _partial_status(client, job_id: str) -> int:
    """Say so on stderr when the result just handed out is partial: exit code 1, else 0."""
    view = client.job(job_id).view
    if view.get("state") == "succeeded":
        return OK
    print(f"partial result: {_ending(view)}", file=sys.stderr)
    return JOB_NOT_SUCCEEDED


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
        status = _partial_status(client, args.job_id)
        print_caution()
        return status
    fmt = args.format or "csv"
    data = client.result_bytes(args.job_id, fmt)
    if fmt == "npz" and sys.stdout.isatty():
        print("refusing to write binary .npz to a terminal; use -o FILE.npz", file=sys.stderr)
        return 2
    sys.stdout.buffer.write(data)
    sys.stdout.flush()
    status = _partial_status(client, args.job_id)
    print_caution()
    return status


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
                                   "progress bar, -o saves the result when it ends (a failed or cancelled "
                                   "job's partial result too, with exit code 1).")
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
    p.add_argument("-o", "--out", help="save the result here when the job ends (partial if it failed)")
    p.add_argument("--format", choices=("csv", "json", "npz"))
    p.add_argument("--timeout", type=float, help="give up after this many seconds (exit code 7)")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress bar")
    add_connection_args(p)
    command(p, cmd_watch, """  stifflane watch 0661a...e7b
  stifflane watch 0661a...e7b -o result.npz""")

    p = sub.add_parser("result", help="fetch a job's result (CSV to stdout, or to a file)",
                       description="Fetch a job's result: CSV on stdout by default; with -o the format "
                                   "follows the file suffix (.csv, .json, .npz). A failed, cancelled or "
                                   "running job gives what its run has computed so far, flagged partial "
                                   "(exit code 1, and why on stderr).")
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
