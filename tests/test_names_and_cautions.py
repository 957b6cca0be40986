"""Names of our own on every surface, and the caution on every output that carries numbers.

The method names on the wire describe the methods (Dormand-Prince 5(4), Radau IIA of order 5,
a Rosenbrock method of order 4, BDF); the flag that holds a state constant is `clamped`. The
caution travels with every export: JSON field, first CSV line, `.npz` entry, client objects.
"""
import io
import json
import re
import subprocess
from pathlib import Path

import numpy as np
import pytest

from engine.integrate import METHODS
from engine.kernels import vm
from engine.model import check_model, prepare
from jobs import blob
from schemas.views import CAUTION
from service import batch_tables, results

ROOT = Path(__file__).resolve().parent.parent

# Spelled in pieces so that this file does not match its own search.
RETIRED_METHOD_NAMES = ["dop" + "ri5", "rad" + "au5", "ro" + "das"]


def tracked_text_files() -> list[Path]:
    names = subprocess.run(["git", "ls-files"], cwd=ROOT, capture_output=True, text=True,
                           check=True).stdout.split()
    return [ROOT / n for n in names if Path(n).suffix in
            {".py", ".md", ".js", ".css", ".html", ".json", ".yml", ".toml", ".txt"}]


def test_the_wire_offers_descriptive_method_names_only():
    assert METHODS == ("auto", "dormand_prince_54", "radau_iia_5", "rosenbrock_4", "bdf")


def test_no_tracked_file_names_a_retired_method_string():
    pattern = re.compile("|".join(RETIRED_METHOD_NAMES), re.IGNORECASE)
    hits = [f"{p.relative_to(ROOT)}:{i}" for p in tracked_text_files()
            for i, line in enumerate(p.read_text(errors="replace").splitlines(), 1) if pattern.search(line)]
    assert hits == []


def test_no_tracked_file_uses_the_retired_state_flag():
    flag = re.compile(r"""["'`]fix""" + r"""ed["'`]|\.fix""" + r"""ed\b""")
    hits = [f"{p.relative_to(ROOT)}:{i}" for p in tracked_text_files()
            for i, line in enumerate(p.read_text(errors="replace").splitlines(), 1) if flag.search(line)]
    assert hits == []


def test_a_clamped_state_is_held_constant_and_the_retired_flag_is_refused():
    model = {"states": {"A": 1.0, "W": {"initial": 2.0, "clamped": True}},
             "parameters": {"k": 1.0}, "reactions": [{"equation": "A + W -> W", "k": "k"}]}
    k, p = prepare(model).kernel, prepare(model).p
    f = np.zeros(2)
    vm.rhs(k, 0.0, np.array([1.0, 2.0]), p, np.zeros(k.n_regs), f)
    assert f[1] == 0.0 and f[0] == pytest.approx(-2.0)  # mass action: -k*A*W, W held
    model["states"]["W"] = {"initial": 2.0, "fix" + "ed": True}
    assert ("states", "W", "fix" + "ed") in {i.path for i in check_model(model)}


def a_result_blob() -> bytes:
    t = np.linspace(0.0, 1.0, 3)
    return blob.encode({"outcome": "succeeded", "message": "", "state_names": ["a"], "aux_names": []},
                       {"t": t, "y": np.exp(-t)[:, None], "aux": np.zeros((3, 0))})


def test_job_exports_carry_the_caution_in_every_format():
    data = a_result_blob()
    assert results.as_json("j", data)["caution"] == CAUTION
    first, header = results.as_csv(data).splitlines()[:2]
    assert first == "# caution: " + CAUTION and header == "t,a"
    with np.load(io.BytesIO(results.as_npz(data)), allow_pickle=False) as z:
        assert str(z["caution"]) == CAUTION


def test_batch_table_exports_carry_the_caution():
    table = batch_tables.Table(index=np.array([0, 1]), value_names=["k"], values=np.array([[1.0], [2.0]]),
                               summary_names=["final_a"], summaries=np.array([[0.3], [0.1]]),
                               outcomes=["succeeded", "succeeded"], messages=["", ""])
    assert batch_tables.as_csv(table).splitlines()[0] == "# caution: " + CAUTION
    with np.load(io.BytesIO(batch_tables.as_npz(table, None, [])), allow_pickle=False) as z:
        assert str(z["caution"]) == CAUTION


def test_the_client_keeps_the_caution_from_every_format():
    from stifflane_client import CAUTION as CLIENT_CAUTION, BatchTable, Result

    assert CLIENT_CAUTION == CAUTION  # the standalone client's copy of the server's text
    data = a_result_blob()
    assert Result.from_npz("j", results.as_npz(data)).caution == CAUTION
    assert Result.from_json(json.loads(json.dumps(results.as_json("j", data)))).caution == CAUTION
    assert BatchTable.from_json({"columns": {}}).caution == CAUTION
