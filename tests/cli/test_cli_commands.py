"""The command line: every command documented, local validation, job commands on the live stack."""
import csv
import json
import time

import numpy as np
import pytest

from cli import common
from cli.main import main, parser
from cli.report import format_report
from tests.conftest import example_path

DEMO = str(example_path("jobs", "tarnwhistle_demo.json"))
JOB_COMMANDS = ["submit", "watch", "result", "list", "cancel", "report", "validate",
                "up", "redis", "api", "worker", "warm"]


@pytest.mark.parametrize("name", JOB_COMMANDS)
def test_every_job_command_has_help_with_examples_and_exit_codes(name, capsys):
    with pytest.raises(SystemExit) as info:
        main([name, "--help"])
    assert info.value.code == 0
    out = capsys.readouterr().out
    assert "examples:" in out and f"stifflane {name}" in out and "exit codes:" in out


@pytest.mark.parametrize("name", [["batch", c] for c in ("submit", "watch", "table", "stats", "list", "cancel")]
                         + [["keys", c] for c in ("create", "list", "revoke")])
def test_every_batch_and_keys_command_has_help_with_examples(name, capsys):
    with pytest.raises(SystemExit) as info:
        main([*name, "--help"])
    assert info.value.code == 0
    out = capsys.readouterr().out
    assert "examples:" in out and f"stifflane {' '.join(name)}" in out and "exit codes:" in out


def test_the_stack_commands_are_still_there():
    names = set(parser()._subparsers._group_actions[0].choices)
    assert {"up", "api", "worker", "redis", "warm", "keys"} <= names


def test_validate_accepts_the_demo_locally(capsys):
    assert main(["validate", DEMO]) == common.OK
    assert "valid" in capsys.readouterr().out


def test_validate_reports_problems_by_pointer_with_exit_code_3(tmp_path, capsys):
    spec = json.loads(open(DEMO).read())
    spec["model"]["ddt"]["H2"] = "kLa * (H2_sat - H2x)"
    spec["span"] = [5, 1]
    bad = tmp_path / "bad.json"
    bad.write_text(json.dumps(spec))
    assert main(["validate", str(bad)]) == common.INVALID_SPEC
    out = capsys.readouterr().out
    assert "/model/ddt/H2: position 16: unknown name 'H2x'" in out
    assert "/span: t_end must be greater than t_start" in out


def test_validate_refuses_non_json_and_missing_files(tmp_path):
    nan = tmp_path / "nan.json"
    nan.write_text('{"span": [0, NaN]}')
    assert main(["validate", str(nan)]) == common.INVALID_SPEC
    assert main(["validate", str(tmp_path / "missing.json")]) == common.USAGE


def test_the_report_reads_as_tables():
    result = {"outcome": "succeeded", "message": "integrated to the end of the span", "report": {
        "accepted_steps": 120, "rejected_steps": 3, "rhs_evaluations": 900, "steps_per_method": {"dormand_prince_54": 20, "radau_iia_5": 100},
        "seconds_per_method": {"dormand_prince_54": 0.01, "radau_iia_5": 0.2},
        "switches": [{"t": 0.5, "from": "dormand_prince_54", "to": "radau_iia_5", "h": 1e-3, "rho": 3.2e4,
                      "explicit_step": 1.0e-4, "reason": "stiffness_detected"}]}}
    result["report"]["t_reached"] = 10.0
    result["report"]["machine_code"] = {"used": False, "seconds": 0.0,
                                        "reason": "the job asked for the interpreter"}
    text = format_report(result)
    assert "accepted steps" in text and "120" in text
    assert "interpreter (the job asked for the interpreter)" in text
    assert "Method phases" in text and text.index("dormand_prince_54", text.index("Method phases")) < text.index("radau_iia_5", text.index("Method phases"))
    assert "Method switches" in text and "stiffness_detected" in text
    lines = text.splitlines()
    header = next(i for i, line in enumerate(lines) if line.startswith("t ") and "reason" in line)
    assert set(lines[header + 1].replace(" ", "")) == {"-"}


def test_the_report_lists_events_units_and_says_a_result_is_partial():
    result = {"state": "failed", "outcome": "step_underflow", "partial": True, "t_reached": 1.0, "t_end": 2.0,
              "message": "the step size fell to the round-off limit at t=1", "times": [0.0, 0.5, 1.0],
              "units": {"a": "mol/L"}, "report": {"accepted_steps": 12, "t_reached": 1.0},
              "events": [{"name": "half_gone", "t": 0.231, "states": {"a": 0.5, "b": 0.5}}]}
    text = format_report(result)
    lines = text.splitlines()
    assert lines[:3] == ["state: failed (outcome step_underflow)",
                         "The step size fell to the round-off limit at t=1.",
                         "Partial result: solved up to t = 1 of 2 before the run stopped (3 output times)."]
    events = lines.index("Events")
    assert lines[events + 1].split() == ["event", "t", "a", "[mol/L]", "b"]
    assert lines[events + 3].split() == ["half_gone", "0.231", "0.5", "0.5"]
    assert "Units" in lines and "a     mol/L" in text
    whole = format_report({"state": "succeeded", "outcome": "succeeded", "partial": False, "message": "done"})
    assert "Partial" not in whole and "Events" not in whole


def test_an_unreachable_server_exits_5(capsys):
    assert main(["--server", "http://127.0.0.1:9", "list"]) == common.UNREACHABLE
    assert "stifflane up" in capsys.readouterr().err


@pytest.mark.e2e
def test_submit_wait_save_report_list_and_result(stack, tmp_path, capsys):
    out = tmp_path / "demo.csv"
    assert main(["submit", DEMO, "--server", stack.base, "--wait", "-q", "-o", str(out)]) == common.OK
    streams = capsys.readouterr()
    job_id = streams.out.strip()
    assert "caution: Numerical results are approximations" in streams.err
    caution, *rows = list(csv.reader(out.open()))
    assert caution[0].startswith("# caution: Numerical results are approximations")
    assert rows[0] == ["t", "S [mol/L]", "H2 [mol/L]", "P [mol/L]", "Byp [mol/L]", "T [K]",
                       "k2", "r1", "r2", "feed", "heat"] and len(rows) == 122
    assert main(["report", job_id, "--server", stack.base]) == common.OK
    assert "accepted steps" in capsys.readouterr().out
    assert main(["list", "--server", stack.base, "--limit", "5"]) == common.OK
    assert job_id in capsys.readouterr().out
    npz = tmp_path / "demo.npz"
    assert main(["result", job_id, "--server", stack.base, "-o", str(npz)]) == common.OK
    with np.load(npz) as z:
        np.testing.assert_array_equal(z["t"], np.array([float(r[0]) for r in rows[1:]]))


@pytest.mark.e2e
def test_exit_codes_for_invalid_specs_missing_jobs_and_failed_jobs(stack, tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("STIFFLANE_URL", stack.base)
    spec = {"model": {"states": {"u": 1.0, "v": 0.0}, "ddt": {"u": "v", "v": "-u"}}, "span": [0, 1000],
            "method": "dormand_prince_54", "limits": {"max_steps": 5}}
    path = tmp_path / "short.json"
    path.write_text(json.dumps(spec))
    assert main(["submit", str(path), "--wait", "-q"]) == common.JOB_NOT_SUCCEEDED
    path.write_text(json.dumps(spec | {"span": [1, 0]}))
    assert main(["submit", str(path)]) == common.INVALID_SPEC
    assert main(["watch", "0" * 28, "-q"]) == common.API_ERROR
    assert "no job" in capsys.readouterr().err


@pytest.mark.e2e
def test_cancel_a_running_job(stack, tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("STIFFLANE_URL", stack.base)
    spec = {"label": "cli long run", "model": {"states": {"u": 1.0, "v": 0.0}, "ddt": {"u": "v", "v": "-u"}},
            "span": [0, 1e7], "output": {"count": 3}, "tolerance": {"rtol": 1e-12, "atol": 1e-14},
            "method": "dormand_prince_54", "limits": {"max_steps": 100_000_000, "max_wall_seconds": 120}}
    path = tmp_path / "long.json"
    path.write_text(json.dumps(spec))
    assert main(["submit", str(path)]) == common.OK
    job_id = capsys.readouterr().out.strip()
    stack.wait(job_id, states=("running",), timeout=60)
    time.sleep(1.0)  # let it run a little: a partial result to keep
    assert main(["cancel", job_id]) == common.OK
    capsys.readouterr()
    assert main(["watch", job_id, "-q", "--timeout", "120"]) == common.JOB_NOT_SUCCEEDED
    streams = capsys.readouterr()
    # before: "job cancelled: cancelled cancelled on request at t=..."
    assert "cancelled cancelled" not in streams.out + streams.err
    assert f"job {job_id} was cancelled on request at t=" in streams.err
    assert "its partial result, up to t = " in streams.err and f"stifflane result {job_id}" in streams.err


def test_keys_are_created_listed_and_revoked_in_redis(redis_server, monkeypatch, capsys):
    from jobs import accounts
    from jobs.settings import Settings
    from jobs.store import JobStore

    monkeypatch.setenv("REDIS_URL", redis_server.url)
    monkeypatch.setenv("STIFFLANE_KEY_PREFIX", "clikeys")
    assert main(["keys", "create", "alice", "--label", "laptop"]) == common.OK
    key = capsys.readouterr().out.strip()
    store = JobStore.connect(Settings.from_env())
    principal = accounts.authenticate(store.r, store.keys, key)
    assert principal.owner == "alice" and principal.role == "user"
    assert main(["keys", "list"]) == common.OK
    listing = capsys.readouterr().out
    assert principal.key_id in listing and "alice" in listing and key not in listing
    assert main(["keys", "revoke", principal.key_id]) == common.OK
    assert accounts.authenticate(store.r, store.keys, key) is None
    assert main(["keys", "revoke", principal.key_id]) == 4


@pytest.mark.e2e
def test_batch_submit_wait_table_and_stats(stack, tmp_path, capsys, monkeypatch):
    from tests.client.batch_specs import BLOWUP

    monkeypatch.setenv("STIFFLANE_URL", stack.base)
    spec = tmp_path / "sweep.json"
    spec.write_text(json.dumps(BLOWUP))
    out = tmp_path / "sweep.csv"
    assert main(["batch", "submit", str(spec), "--wait", "-q", "-o", str(out)]) == common.OK
    batch_id = capsys.readouterr().out.strip()
    with out.open() as f:
        assert f.readline().startswith("# caution: ")
        rows = list(csv.DictReader(f))
    assert [r["outcome"] == "succeeded" for r in rows] == [True, True, True, False]
    assert main(["batch", "stats", batch_id]) == common.OK
    assert "final_y" in capsys.readouterr().out
    assert main(["batch", "list"]) == common.OK
    assert batch_id in capsys.readouterr().out


@pytest.mark.e2e
def test_a_failed_jobs_partial_result_and_report_come_with_why(stack, tmp_path, capsys, monkeypatch):
    # y' = y^2, y(0) = 1 blows up at t = 1 (y = 1/(1 - t)); the event a - 2 fires at t = 0.5
    monkeypatch.setenv("STIFFLANE_URL", stack.base)
    spec = {"model": {"states": {"y": {"initial": 1.0, "unit": "mol/L"}}, "ddt": {"y": "y^2"},
                      "events": [{"name": "doubled", "when": "y - 2", "direction": "rising"}]},
            "span": [0, 2], "output": {"count": 21}}
    path = tmp_path / "blow_up.json"
    path.write_text(json.dumps(spec))
    out = tmp_path / "partial.csv"
    assert main(["submit", str(path), "--wait", "-q", "-o", str(out)]) == common.JOB_NOT_SUCCEEDED
    streams = capsys.readouterr()
    job_id = streams.out.strip()
    # before: "job failed: step_underflow the step size fell ..." and nothing saved
    assert f"job {job_id} failed: the step size fell to the round-off limit" in streams.err
    assert "its partial result, up to t = 1 (50% of the span), is kept: saved to" in streams.err
    caution, partial, header, *rows = out.read_text().splitlines()
    assert partial == "# partial: solved up to t = 1 of 2; step_underflow"
    assert header == "t,y [mol/L]" and len(rows) == 11
    assert main(["result", job_id]) == common.JOB_NOT_SUCCEEDED
    streams = capsys.readouterr()
    assert "# partial: solved up to t = 1 of 2" in streams.out
    assert f"partial result: job {job_id} failed: the step size fell" in streams.err
    assert main(["report", job_id]) == common.JOB_NOT_SUCCEEDED
    text = capsys.readouterr().out
    assert "Partial result: solved up to t = 1 of 2 before the run stopped (11 output times)." in text
    events = text.splitlines()[text.splitlines().index("Events") + 3].split()
    assert events[0] == "doubled" and float(events[1]) == pytest.approx(0.5, abs=1e-6)
    assert float(events[2]) == pytest.approx(2.0, abs=1e-6)

