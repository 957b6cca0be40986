"""Problem documents read as sentences: where a body is not JSON and what is probably wrong,
the size limit of a body too large, one root cause for a spec (jobs and batches alike)."""
import json

import pytest

PROBLEM = "application/problem+json"
MODEL = {"states": {"y": 1.0}, "parameters": {"k": 1.0}, "ddt": {"y": "-k*y"}}


def post(client, path, body):
    data = body if isinstance(body, (str, bytes)) else json.dumps(body)
    return client.post(path, data=data, content_type="application/json")


@pytest.mark.parametrize("body, line, column, words", [
    ('{"model": {}, "span": [0, 1],}', 1, 30, "a comma after the last item is not allowed"),
    ('{\n  "span": [0, 1]\n  "model": {}\n}', 3, 3, "a comma is missing between two items"),
    ("{'span': [0, 1]}", 1, 2, "a key must be a string in double quotes"),
    ('{"nonnegative": True}', 1, 17, "true, false and null are lower case"),
])
def test_invalid_json_gets_line_column_and_a_plain_sentence(client, body, line, column, words):
    r = post(client, "/v1/jobs", body)
    assert r.status_code == 400 and r.mimetype == PROBLEM
    p = r.get_json()
    assert (p["line"], p["column"]) == (line, column)
    assert f"line {line}, column {column}" in p["detail"] and words in p["detail"]
    for parser_words in ("Expecting", "delimiter", "enclosed in double quotes"):
        assert parser_words not in p["detail"]


def test_an_empty_body_is_said_to_be_empty(client):
    r = post(client, "/v1/jobs", "")
    assert r.status_code == 400 and "empty" in r.get_json()["detail"]


def test_a_body_over_the_limit_states_the_limit(client, app):
    limit = app.config["MAX_CONTENT_LENGTH"]
    r = post(client, "/v1/jobs", "x" * (limit + 1))
    assert r.status_code == 413 and r.mimetype == PROBLEM
    p = r.get_json()
    assert p["limit_bytes"] == limit and f"{limit} bytes" in p["detail"]


def test_a_bare_model_posted_as_a_job_is_one_problem_saying_how_to_wrap_it(client):
    r = post(client, "/v1/jobs", MODEL)
    assert r.status_code == 422
    (error,) = r.get_json()["errors"]
    assert error["pointer"] == "/" and 'put it under "model"' in error["detail"]


def test_a_batch_answers_every_problem_at_once_with_suggestions(client):
    spec = {"base": {"model": MODEL, "tspan": [0, 1]}, "grid": {"parameters": {"kk": [1, 2]}},
            "summaries": [{"kind": "final", "of": "yy"}]}
    r = post(client, "/v1/batches", spec)
    assert r.status_code == 422
    found = {e["pointer"]: e["detail"] for e in r.get_json()["errors"]}
    assert found == {"/base/tspan": "unknown field 'tspan'; did you mean 'span'?",
                     "/grid/parameters/kk": "'kk' is not a parameter of the base model; did you mean 'k'?",
                     "/summaries/0/of": "'yy' is not a state or derived quantity of the base model; "
                                        "did you mean 'y'?"}
