"""The results file's shape, JSON safety and the ratio rows (bench/report.py)."""
import json
import math

import numpy as np
import pytest

from bench import report
from bench.references import CACHE
from bench import problems as PR

RECORD_KEYS = {"problem", "rtol", "solver", "seconds", "digits", "nfev", "steps", "status"}


def _rec(problem, solver, rtol, seconds, digits, status="ok"):
    return {"problem": problem, "n": 3, "rtol": rtol, "atol": rtol * 1e-4, "solver": solver,
            "status": status, "seconds": seconds, "digits": digits, "steps": 10, "nfev": 50,
            "njev": 2, "nlu": 5, "repeats": 3, "warmup_seconds": seconds, "message": ""}


def _result():
    recs = []
    for rtol, d in ((1e-4, 3.0), (1e-6, 5.0), (1e-8, 7.0)):
        recs.append(_rec("hires", "engine/auto", rtol, 1e-3 * (d / 3), d))
        recs.append(_rec("hires", "odeint+numba", rtol, 1e-2 * (d / 3), d))
        recs.append(_rec("hires", "solve_ivp/Radau", rtol, 1.0 * (d / 3), d))
        recs.append(_rec("hires", "solve_ivp/BDF", rtol, None, None, status="timeout"))
    return {"mode": "full", "cap_seconds": 20.0, "rtols": [1e-4, 1e-6, 1e-8],
            "machine": {"cpu": "test", "cores": 2, "python": "3", "numpy": "2", "scipy": "1",
                        "numba": "0", "date": "today"},
            "problems": [{"problem": "hires", "n": 8, "source": "test"}], "records": recs,
            "sweep": {"members": 10, "seconds": 0.001, "solves_per_second": 10000.0, "note": "test"}}


def test_json_safe_turns_arrays_and_non_finite_numbers_into_plain_json():
    out = report.json_safe({"a": np.array([1.0, np.nan]), "b": np.int64(3), "c": math.inf})
    assert out == {"a": [1.0, None], "b": 3, "c": None}
    json.dumps(out, allow_nan=False)


def test_ratios_compare_at_matched_digits_and_judge_the_targets():
    rows = {(r["problem"], r["peer"]): r for r in report.ratios(_result())}
    odeint = rows[("hires", "odeint+numba")]
    assert odeint["basis"] == "matched digits" and odeint["digits"] == 5.0
    assert math.isclose(odeint["value"], 10.0) and odeint["met"] is True
    radau = rows[("hires", "solve_ivp/Radau")]
    assert math.isclose(radau["value"], 1000.0) and radau["met"] is True
    bdf = rows[("hires", "solve_ivp/BDF")]
    assert bdf["value"] is None and bdf["met"] is None  # a timed-out peer has no ratio
    assert rows[("robertson", "-")]["met"] is True


def test_markdown_lists_every_solver_with_its_status():
    result = _result()
    result["ratios"] = report.ratios(result)
    text = report.markdown(result)
    assert "| solve_ivp/BDF | - |" in text and "timeout" in text
    assert "### Targets" in text


def test_records_in_the_latest_results_have_the_documented_fields():
    path = CACHE.parent / "latest.json"
    if not path.exists():
        pytest.skip("no benchmark run on this machine yet (bench/results/latest.json is made by make bench)")
    data = json.loads(path.read_text())
    assert {"cpu", "python", "numpy", "scipy", "numba", "date"} <= set(data["machine"])
    for rec in data["records"]:
        assert RECORD_KEYS <= set(rec)
        assert rec["status"] in ("ok", "failed", "timeout", "unavailable")
        assert rec["solver"].split("/")[0] in ("engine", "solve_ivp") or rec["solver"] in (
            "odeint+numba", "cvode+numba")


def test_cached_references_agree_with_published_end_values():
    # Test Set for IVP Solvers end values (from memory) vs SciPy Radau at rtol 1e-12. The Van der
    # Pol values are those of the scaled form (VDPOL, eps = 1e-6, t = 2; bench/problems.py), not
    # of the unscaled examples/models/vanderpol.json.
    if not CACHE.exists():
        pytest.skip("no reference cache yet (bench/results/references.json is made by make bench)")
    cache = json.loads(CACHE.read_text())
    for name in ("robertson", "hires", "vanderpol"):
        problem = PR.build(name)
        hits = [v for k, v in cache.items() if k.startswith(name + ":")]
        for hit in hits:
            from bench.matching import digits
            assert digits(hit["y"], problem.published, problem.floor) > 8
