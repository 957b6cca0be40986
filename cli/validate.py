"""``stifflane validate``: check a spec in-process, with the server's own schema, without submitting."""
from __future__ import annotations

import json
import sys
from pathlib import Path

from cli.common import INVALID_SPEC, OK, USAGE, command


def problems(spec) -> list[dict]:
    """[{pointer, detail}] for a spec (empty when valid), exactly as the API would report them."""
    from marshmallow import ValidationError

    from schemas.job import MAX_OUTPUT_POINTS, JobSpecSchema, output_times
    from schemas.problem import pointers

    if not isinstance(spec, dict):
        return [{"pointer": "/", "detail": "a job spec is a JSON object"}]
    try:
        loaded = JobSpecSchema().load(spec)
    except ValidationError as e:
        return pointers(e.messages)
    n = len(output_times(loaded["span"], loaded["output"]))
    if n > MAX_OUTPUT_POINTS:
        return [{"pointer": "/output", "detail": f"{n} output points; at most {MAX_OUTPUT_POINTS} allowed"}]
    return []


def _reject_constant(token):
    raise ValueError(f"{token} is not allowed: JSON has no NaN or Infinity")


def cmd_validate(args) -> int:
    try:
        text = sys.stdin.read() if args.spec == "-" else Path(args.spec).read_text(encoding="utf-8")
    except OSError as e:
        print(f"error: {e}", file=sys.stderr)
        return USAGE
    try:
        spec = json.loads(text, parse_constant=_reject_constant)
    except ValueError as e:
        print(f"{args.spec}: not valid JSON: {e}", file=sys.stderr)
        return INVALID_SPEC
    found = problems(spec)
    for p in found:
        print(f"{args.spec}: {p['pointer']}: {p['detail']}")
    if found:
        print(f"{len(found)} problem(s)", file=sys.stderr)
        return INVALID_SPEC
    from schemas.job import describe_model

    m = describe_model(spec["model"])
    c = m["counts"]
    print(f"{args.spec}: valid ({m.get('title') or 'model'}: {c['states']} states, {c['parameters']} parameters, "
          f"{c['reactions']} reactions, {c['events']} events, {len(m['conservation_laws'])} conservation laws)")
    return OK


def register(sub) -> None:
    p = sub.add_parser("validate", help="check a job spec locally, without a server",
                       description="Check a job spec with the same schema and model checks the server "
                                   "uses, in this process; nothing is submitted.")
    p.add_argument("spec", help="path of a job spec JSON file, or - to read stdin")
    command(p, cmd_validate, """  stifflane validate examples/jobs/tarnwhistle_demo.json
  cat spec.json | stifflane validate -""")
