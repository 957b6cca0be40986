"""``stifflane validate``: check a spec in-process, with the server's own schema, without submitting."""
from __future__ import annotations

import json
import sys
from pathlib import Path

from cli.common import INVALID_SPEC, OK, ROOT, USAGE, command


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


def shipped_job_for(model: dict) -> Path | None:
    """The job spec under examples/jobs/ that runs this very model, if one does."""
    for path in sorted((ROOT / "examples" / "jobs").glob("*.json")):
        try:
            if json.loads(path.read_text(encoding="utf-8")).get("model") == model:
                return path
        except (OSError, ValueError, AttributeError):
            continue
    return None


def wrap_hint(name: str, model: dict) -> str:
    """How to turn a bare model file into the smallest job spec that runs it."""
    shipped = shipped_job_for(model)
    if shipped is not None:
        example = f"{shipped.relative_to(ROOT)} is a complete job spec for this model."
    else:
        example = "examples/jobs/ has a complete job spec for every model in examples/models/."
    return (f"{name}: this is a model, not a job spec. A job spec puts the model under \"model\" and\n"
            f"says the time span to integrate over; the smallest one for this file is\n\n"
            f"  {{\n    \"model\": <the contents of {name}>,\n    \"span\": [0, 10]\n  }}\n\n"
            f"with span = [t_start, t_end] in the model's time unit (optional: \"output\", \"tolerance\",\n"
            f"\"method\", \"label\"; see README.md). {example}")


def cmd_validate(args) -> int:
    try:
        text = sys.stdin.read() if args.spec == "-" else Path(args.spec).read_text(encoding="utf-8")
    except OSError as e:
        print(f"error: {e}", file=sys.stderr)
        return USAGE
    try:
        spec = json.loads(text, parse_constant=_reject_constant)
    except json.JSONDecodeError as e:
        from schemas.problem import json_error_detail

        print(f"{args.spec}: {json_error_detail(e, 'the file')}", file=sys.stderr)
        return INVALID_SPEC
    except ValueError as e:
        print(f"{args.spec}: not valid JSON: {e}", file=sys.stderr)
        return INVALID_SPEC
    from schemas.job import is_bare_model

    if is_bare_model(spec):
        print(wrap_hint(args.spec, spec))
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
