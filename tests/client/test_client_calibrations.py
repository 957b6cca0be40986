"""Calibrations through the client on the live stack: dicts for views and estimates, pandas
tables when pandas is importable, plain columns when it is not."""
import builtins

import pytest

from stifflane_client import CalibrationFailed, Client, InvalidSpec, calibration_tables
from tests.service.calibration_specs import K_TRUE, decay_spec

pytestmark = pytest.mark.e2e


def test_submit_wait_result_and_tables(stack):
    client = Client(stack.base)
    created = client.submit_calibration(decay_spec())
    assert created["state"] == "queued" and created["starts"] == 4
    view = client.wait_calibration(created["id"], timeout=120)
    assert view["state"] == "succeeded" and view["progress"]["done"] == 4
    est = client.calibration_result(created["id"])
    assert isinstance(est, dict) and est["unknowns"][0]["estimate"] == pytest.approx(K_TRUE, rel=1e-6)
    t = client.calibration_tables(created["id"])
    assert t["parameters"].loc["k", "estimate"] == pytest.approx(K_TRUE, rel=1e-6)  # a pandas DataFrame
    assert len(t["starts"]) == 4 and len(t["residuals"]) == 7
    assert list(t["correlation"].columns) == ["k"]
    csv_text = client.calibration_bytes(created["id"], "csv", "parameters").decode()
    assert csv_text.startswith("# caution:") and "\nname,estimate," in csv_text
    assert created["id"] in [c["id"] for c in client.calibrations(limit=50)]


def test_calibrate_returns_the_estimate_or_raises(stack):
    client = Client(stack.base)
    assert client.calibrate(decay_spec(), timeout=120)["unknowns"][0]["name"] == "k"
    with pytest.raises(InvalidSpec) as bad:
        client.submit_calibration(decay_spec(unknowns=[{"name": "k", "lower": 2, "upper": 1}]))
    assert bad.value.errors[0]["pointer"] == "/unknowns/0/upper"
    spec = decay_spec(starts=200)
    cal_id = client.submit_calibration(spec)["id"]
    client.cancel_calibration(cal_id)
    view = client.wait_calibration(cal_id, timeout=60)
    assert view["state"] == "cancelled"
    assert str(CalibrationFailed(view)).startswith(f"calibration {cal_id} cancelled")


def test_tables_without_pandas_are_plain_columns(monkeypatch):
    real_import = builtins.__import__

    def no_pandas(name, *args, **kwargs):
        if name == "pandas" or name.startswith("pandas."):
            raise ImportError("no pandas here")
        return real_import(name, *args, **kwargs)

    monkeypatch.setattr(builtins, "__import__", no_pandas)
    est = {"unknowns": [{"name": "k", "estimate": 0.3, "standard_error": 0.01, "ci95": [0.28, 0.32],
                         "at_bound": False}], "correlation": [[1.0]],
           "starts": [{"index": 0, "status": "converged", "sum_of_squares": 1e-9, "x0": [1.0], "x": [0.3],
                       "evaluations": 9, "failed_solves": 0, "seconds": 0.1, "message": "ok"}],
           "experiments": [{"name": "e", "times": [0, 1], "observed": {"A": [2, 1.5]}, "fitted": {"A": [2, 1.48]},
                            "residuals": {"A": [0, 0.2]}}]}
    t = calibration_tables(est)
    assert t["parameters"] == {"name": ["k"], "estimate": [0.3], "standard_error": [0.01], "ci95_low": [0.28],
                               "ci95_high": [0.32], "at_bound": [False]}
    assert t["correlation"] == {"name": ["k"], "k": [1.0]}
    assert t["starts"]["x_k"] == [0.3] and t["residuals"]["residual"] == [0, 0.2]
