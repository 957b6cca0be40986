"""Bad calibration input: each case is a 422 (or 413) problem naming the field, the row and the
column, in one answer; nothing bad is accepted, nothing crashes."""
import dataclasses
import json

import pytest

from tests.service.calibration_specs import decay_spec

PROBLEM = "application/problem+json"


@pytest.fixture
def limited(settings, store):
    from service import create_app

    small = dataclasses.replace(settings, max_calibration_rows=10, max_calibration_experiments=2,
                                max_calibration_unknowns=1, max_calibration_starts=20)
    return create_app(small, store=store).test_client()


def post(client, body):
    return client.post("/v1/calibrations", data=json.dumps(body), content_type="application/json")


def errors_of(r) -> dict:
    assert r.status_code == 422, r.get_data(as_text=True)
    assert r.mimetype == PROBLEM
    return {e["pointer"]: e["detail"] for e in r.get_json()["errors"]}


def with_experiment(**experiment) -> dict:
    e = {"name": "run1", "span": [0.0, 10.0], **experiment}
    return decay_spec(experiments=[e])


def test_a_measurement_outside_the_span_names_the_row_and_column(client):
    spec = with_experiment(data=[{"t": 0.0, "A": 2.0}, {"t": 1.0, "A": 1.5}, {"t": 12.0, "A": 0.1}])
    errors = errors_of(post(client, spec))
    assert errors == {"/experiments/0/data/2/t": "time 12 is outside the experiment's span [0, 10]"}


def test_a_csv_measurement_outside_the_span_names_the_line_and_column(client):
    errors = errors_of(post(client, with_experiment(csv="# invented\nt,A\n0,2\n\n11,0.1\n")))
    assert errors == {"/experiments/0/csv": "line 5, column 't': time 11 is outside the experiment's span [0, 10]"}


@pytest.mark.parametrize("cell", ["NaN", "nan", "inf", "-Infinity", "1e999"])
def test_nan_or_infinite_csv_cells_are_refused_by_line_and_column(client, cell):
    errors = errors_of(post(client, with_experiment(csv=f"t,A\n0,2\n1,{cell}\n2,1\n")))
    assert list(errors) == ["/experiments/0/csv"]
    detail = errors["/experiments/0/csv"]
    assert detail.startswith("line 3, column 'A': ") and "not a finite number" in detail and "empty" in detail


def test_nan_in_json_rows_is_refused(client):
    r = client.post("/v1/calibrations", data=json.dumps(with_experiment(data=[{"t": 0, "A": 1}])).replace(
        '"A": 1', '"A": NaN'), content_type="application/json")
    assert r.status_code == 400 and "finite" in r.get_json()["detail"]  # the JSON reader refuses the token
    errors = errors_of(post(client, with_experiment(data=[{"t": 0, "A": 1}, {"t": 1, "A": "NaN"}])))
    assert errors == {"/experiments/0/data/1/A": "must be a number, or null for a missing value (got the text 'NaN')"}


def test_zero_and_negative_sigma_are_refused_where_they_are(client):
    spec = with_experiment(data=[{"t": 0, "A": 2.0}, {"t": 1, "A": 1.5}, {"t": 2, "A": 1.1}],
                           sigma=[{"t": 0, "A": 0.0}, {"t": 1, "A": -0.1}, {"t": 2, "A": None}])
    errors = errors_of(post(client, spec))
    assert set(errors) == {"/experiments/0/sigma/0/A", "/experiments/0/sigma/1/A"}
    assert "must be positive (got 0)" in errors["/experiments/0/sigma/0/A"]
    assert "must be positive (got -0.1)" in errors["/experiments/0/sigma/1/A"]


def test_a_noise_model_that_gives_zero_sigma_is_refused(client):
    errors = errors_of(post(client, decay_spec(noise={"A": {"absolute": 0, "relative": 0}})))
    assert "zero sigma" in errors["/noise/A"]
    spec = with_experiment(data=[{"t": 0, "A": 2.0}, {"t": 9, "A": 0.0}])
    spec["noise"] = {"A": {"relative": 0.05}}
    errors = errors_of(post(client, spec))
    assert list(errors) == ["/experiments/0/data/1/A"] and "sigma is 0 here" in errors["/experiments/0/data/1/A"]
    errors = errors_of(post(client, decay_spec(noise={"A": {"absolute": -1}})))
    assert "/noise/A/absolute" in errors


def test_unknown_observables_and_parameters_get_did_you_mean(client):
    spec = decay_spec(observables={"A": "AA"}, noise={"a": {"absolute": 0.1}}, known={"kk": 1.0},
                      unknowns=[{"name": "K", "lower": 0.1, "upper": 1.0}])
    spec["experiments"][0]["data"][1]["B"] = 0.5
    spec["experiments"][0]["parameters"] = {"q": 1.0}
    errors = errors_of(post(client, spec))
    assert errors["/observables/A"] == "'AA' is not a state or derived quantity of the model; did you mean 'A'?"
    assert errors["/noise/a"] == "'a' is not an observable; did you mean 'A'?"
    assert errors["/known/kk"] == "'kk' is not a parameter of the model; did you mean 'k'?"
    assert errors["/unknowns/0/name"].startswith("'K' is not a parameter of the model")
    assert errors["/unknowns/0/name"].endswith("did you mean 'k'?")
    assert errors["/experiments/0/data/1/B"] == "'B' is not an observable; did you mean 'A'?"
    assert errors["/experiments/0/parameters/q"].startswith("'q' is not a parameter of the model")


def test_an_unknown_initial_value_and_an_unknown_csv_column(client):
    spec = with_experiment(csv="t,A,Q\n0,2,1\n1,1.5,\n")
    spec["unknowns"] = [{"name": "init:Z", "lower": 0.1, "upper": 5}]
    errors = errors_of(post(client, spec))
    assert errors["/unknowns/0/name"].startswith("'Z' is not a state of the model")
    assert errors["/experiments/0/csv"] == "line 1, column 'Q': 'Q' is not an observable; did you mean 'A'?"


def test_crossed_bounds_and_other_bound_mistakes(client):
    spec = decay_spec(unknowns=[{"name": "k", "lower": 2.0, "upper": 1.0}])
    assert errors_of(post(client, spec)) == {
        "/unknowns/0/upper": "must be greater than lower (2): the bounds are crossed"}
    spec = decay_spec(unknowns=[{"name": "k", "lower": 0.0, "upper": 1.0}])
    assert "log scale" in errors_of(post(client, spec))["/unknowns/0/lower"]
    spec = decay_spec(unknowns=[{"name": "k", "lower": 0.1, "upper": 1.0, "start": 3.0}])
    assert "within the bounds" in errors_of(post(client, spec))["/unknowns/0/start"]
    spec = decay_spec(unknowns=[{"name": "k", "lower": 0.1, "upper": 1.0}], known={"k": 0.3})
    assert "either known or estimated" in errors_of(post(client, spec))["/known/k"]


def test_more_unknowns_than_data_points_is_refused(client):
    model = {"states": {"A": 2.0}, "parameters": {"k": 1.0, "j": 0.1}, "ddt": {"A": "-k*A - j"}}
    spec = with_experiment(data=[{"t": 1.0, "A": 1.5}])
    spec.update(model=model, unknowns=[{"name": "k", "lower": 0.1, "upper": 1.0},
                                       {"name": "j", "lower": 0.01, "upper": 1.0}])
    errors = errors_of(post(client, spec))
    assert errors == {"/unknowns": "2 unknowns but only 1 measured values: more parameters than data points "
                                   "cannot be estimated"}


def test_data_with_no_observable_columns_is_refused(client):
    errors = errors_of(post(client, with_experiment(data=[{"t": 0.0}, {"t": 1.0}])))
    assert errors["/experiments/0/data"].startswith("no observable columns")
    errors = errors_of(post(client, with_experiment(csv="t\n0\n1\n")))
    assert errors["/experiments/0/csv"].startswith("no observable columns")
    errors = errors_of(post(client, with_experiment(csv="A,B\n1,2\n")))
    assert "needs a time column 't'" in errors["/experiments/0/csv"]
    errors = errors_of(post(client, with_experiment(data=[{"t": 0.0, "A": None}])))
    assert errors == {"/experiments": "no measured value in any experiment: every cell is empty"}


def test_a_50_mb_upload_is_413_before_it_is_read(client):
    body = b'{"model": {}, "experiments": [{"name": "e", "span": [0, 1], "csv": "' + b"0," * (25 * 2 ** 20) + b'"}]}'
    r = client.post("/v1/calibrations", data=body, content_type="application/json")
    assert r.status_code == 413 and r.mimetype == PROBLEM
    problem = r.get_json()
    assert problem["limit_bytes"] == 2 * 2 ** 20 and "calibration body" in problem["detail"]


def test_the_servers_limits_name_the_field_and_the_row(limited):
    rows = [{"t": float(t), "A": 1.0} for t in range(6)]
    spec = decay_spec(experiments=[{"name": "a", "span": [0, 10], "data": rows},
                                   {"name": "b", "span": [0, 10], "data": rows}], starts=21,
                      unknowns=[{"name": "k", "lower": 0.1, "upper": 1}, {"name": "init:A", "lower": 0.1, "upper": 3}])
    errors = errors_of(post(limited, spec))
    assert errors["/experiments/1/data"].startswith("row 4: more than 10 measurement rows in all experiments")
    assert errors["/starts"] == "21 starts; at most 20 allowed"
    assert errors["/unknowns"] == "2 unknowns; at most 1 allowed"
    spec = decay_spec(experiments=[{"name": n, "span": [0, 10], "data": rows[:1]} for n in "abc"])
    assert errors_of(post(limited, spec)) == {"/experiments": "3 experiments; at most 2 allowed"}
    csv_rows = "t,A\n" + "".join(f"{t},1\n" for t in range(12))
    errors = errors_of(post(limited, decay_spec(experiments=[{"name": "a", "span": [0, 20], "csv": csv_rows}])))
    assert errors["/experiments/0/csv"].startswith("line 12: more than 10 measurement rows")


def test_the_spec_is_strict_with_did_you_mean_and_one_answer(client):
    spec = decay_spec()
    spec["experiment"] = spec.pop("experiments")
    spec["starts"] = 0
    errors = errors_of(post(client, spec))
    assert errors["/experiment"] == "unknown field 'experiment'; did you mean 'experiments'?"
    assert "/experiments" not in errors and "/starts" in errors
    both = with_experiment(data=[{"t": 0, "A": 1}], csv="t,A\n0,1\n")
    assert "exactly one of 'data'" in errors_of(post(client, both))["/experiments/0"]
    dup = decay_spec(experiments=[{"name": "a", "span": [0, 10], "data": [{"t": 0, "A": 2}]}] * 2)
    assert errors_of(post(client, dup))["/experiments/1/name"] == "'a' is the name of experiments/0 too"
    assert post(client, {**decay_spec(), "model": {"states": {}}}).status_code == 422


def test_the_numerics_checks_become_422s_that_point_into_the_spec(client, monkeypatch):
    """Issues of calibration.problem.check (paths in the sorted problem) point at the spec's rows."""
    from calibration import problem as numerics

    def check(problem):
        return [numerics.Issue(("experiments", 0, "observed", "A", 0), "a strange value"),
                numerics.Issue(("unknowns", 0, "start"), "not a good start"),
                numerics.Issue(("parameters", "k"), "held and estimated")]  # the numerics' name of "known"

    monkeypatch.setattr(numerics, "check", check)
    spec = with_experiment(data=[{"t": 5.0, "A": 0.5}, {"t": 1.0, "A": 1.5}])  # sorted: row 1 first
    errors = errors_of(post(client, spec))
    assert errors == {"/experiments/0/data/1/A": "a strange value", "/unknowns/0/start": "not a good start",
                      "/known/k": "held and estimated"}
    spec = with_experiment(csv="t,A\n5,0.5\n1,1.5\n")
    assert errors_of(post(client, spec))["/experiments/0/csv"] == "line 3, column 'A': a strange value"
