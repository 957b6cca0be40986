"""`stifflane calibrate`: help for every command, and submit/show/result/list/cancel on the live stack."""
import csv
import io
import json

import pytest

from cli import common
from cli.main import main
from tests.conftest import example_path
from tests.service.calibration_specs import K_TRUE, decay_spec

EXAMPLE = str(example_path("calibrations", "tarnwhistle_isomerisation.json"))


@pytest.mark.parametrize("name", ["submit", "show", "result", "list", "cancel"])
def test_every_calibrate_command_has_help_with_examples(name, capsys):
    with pytest.raises(SystemExit) as info:
        main(["calibrate", name, "--help"])
    assert info.value.code == 0
    out = capsys.readouterr().out
    assert "examples:" in out and f"stifflane calibrate {name}" in out and "exit codes:" in out


@pytest.mark.e2e
def test_submit_wait_show_result_and_list(stack, tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("STIFFLANE_URL", stack.base)
    spec = tmp_path / "fit.json"
    spec.write_text(json.dumps(decay_spec()))
    assert main(["calibrate", "submit", str(spec), "--wait", "-q"]) == common.OK
    captured = capsys.readouterr()
    cal_id = captured.out.splitlines()[0].strip()
    assert "std error" in captured.out and "0.3" in captured.out and "caution:" in captured.err
    assert main(["calibrate", "show", cal_id]) == common.OK
    assert "succeeded" in capsys.readouterr().out
    out = tmp_path / "params.csv"
    assert main(["calibrate", "result", cal_id, "-o", str(out)]) == common.OK
    with out.open() as f:
        assert f.readline().startswith("# caution: ")
        (row,) = list(csv.DictReader(f))
    assert float(row["estimate"]) == pytest.approx(K_TRUE, rel=1e-6)
    whole = tmp_path / "estimate.json"
    assert main(["calibrate", "result", cal_id, "-o", str(whole)]) == common.OK
    assert json.loads(whole.read_text())["unknowns"][0]["name"] == "k"
    capsys.readouterr()
    assert main(["calibrate", "result", cal_id, "--table", "starts"]) == common.OK
    rows = list(csv.DictReader(io.StringIO(capsys.readouterr().out.split("\n", 1)[1])))
    assert len(rows) == 4
    assert main(["calibrate", "list"]) == common.OK
    assert cal_id in capsys.readouterr().out


@pytest.mark.e2e
def test_the_example_submits_and_bad_specs_exit_3(stack, tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("STIFFLANE_URL", stack.base)
    assert main(["calibrate", "submit", EXAMPLE, "-o", str(tmp_path / "k.csv"), "-q"]) == common.OK
    assert "k1" in (tmp_path / "k.csv").read_text()
    bad = tmp_path / "bad.json"
    bad.write_text(json.dumps(decay_spec(unknowns=[{"name": "kk", "lower": 1, "upper": 2}])))
    assert main(["calibrate", "submit", str(bad)]) == common.INVALID_SPEC
    assert "/unknowns/0/name" in capsys.readouterr().err
    assert main(["calibrate", "show", "0" * 28]) == common.API_ERROR
