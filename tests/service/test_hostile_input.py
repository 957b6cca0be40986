"""Hostile and sloppy input through the test client: body limits, loose types, huge numbers."""
import io
import json

import pytest

from tests.service.test_jobs_api import DECAY, PROBLEM, pointers, post

LIMIT = 2 * 1024 * 1024  # Settings.max_body_bytes


def chunked(client, path, data: bytes, **headers):
    """A body without Content-Length, as a server that de-chunks it presents it (gunicorn sets
    wsgi.input_terminated)."""
    return client.post(path, input_stream=io.BytesIO(data), content_type="application/json",
                       headers={"Transfer-Encoding": "chunked", **headers},
                       environ_overrides={"wsgi.input_terminated": True})


def test_a_chunked_body_over_the_limit_is_413_like_a_sized_one(client):
    valid = json.dumps(DECAY).encode()
    body = valid + b" " * (LIMIT + 1000)  # valid JSON cut at the limit: refused, not validated
    for r in (chunked(client, "/v1/jobs", body), post(client, body)):
        assert r.status_code == 413 and r.mimetype == PROBLEM
        assert str(LIMIT) in r.get_json()["detail"]


def test_a_chunked_body_with_trailing_garbage_past_the_limit_is_413(client):
    body = json.dumps(DECAY).encode() + b" " * (LIMIT - 200) + b"garbage" * 100
    r = chunked(client, "/v1/jobs", body)
    assert r.status_code == 413


def test_a_chunked_body_under_the_limit_is_read_whole(client):
    r = chunked(client, "/v1/jobs", json.dumps(DECAY).encode())
    assert r.status_code == 202, r.get_json()
    r = chunked(client, "/v1/jobs", json.dumps(DECAY).encode() + b" " * (LIMIT - 2000))
    assert r.status_code == 202


def test_a_chunked_body_over_the_limit_is_413_before_the_idempotency_fingerprint(client):
    body = json.dumps(DECAY).encode() + b" " * (LIMIT + 10)
    r = chunked(client, "/v1/jobs", body, **{"Idempotency-Key": "big-1"})
    assert r.status_code == 413


def test_a_chunked_batch_over_the_limit_is_413(client):
    r = chunked(client, "/v1/batches", b"{" + b" " * (LIMIT + 10) + b"}")
    assert r.status_code == 413


@pytest.mark.parametrize("value", ["yes", "true", 1, 0, None])
def test_nonnegative_takes_only_a_json_boolean(client, value):
    r = post(client, {**DECAY, "nonnegative": value})
    assert r.status_code == 422 and "/nonnegative" in pointers(r)
    assert "true or false" in pointers(r)["/nonnegative"]


def test_nonnegative_true_and_false_are_accepted(client):
    for value in (True, False):
        assert post(client, {**DECAY, "nonnegative": value}).status_code == 202


@pytest.mark.parametrize("section,value", [("ddt", 5), ("ddt", 5.5), ("ddt", True), ("ddt", {"x": 1})])
def test_a_ddt_that_is_not_a_string_is_refused_with_its_pointer(client, section, value):
    spec = {**DECAY, "model": {**DECAY["model"], "ddt": {"a": value}}}
    r = post(client, spec)
    assert r.status_code == 422, r.get_json()
    detail = pointers(r)["/model/ddt/a"]
    assert "expression written as a string" in detail


def test_derived_and_event_conditions_must_be_strings_too(client):
    model = {**DECAY["model"], "derived": {"half": 0.5}, "events": [{"name": "low", "when": 1}]}
    r = post(client, {**DECAY, "model": model})
    assert r.status_code == 422
    found = pointers(r)
    assert "string" in found["/model/derived/half"] and "string" in found["/model/events/0/when"]


def test_a_string_constant_in_ddt_is_fine(client):
    assert post(client, {**DECAY, "model": {**DECAY["model"], "ddt": {"a": "5"}}}).status_code == 202


def test_a_number_with_thousands_of_digits_gets_a_plain_message(client):
    body = '{"model": {"states": {"a": 1}, "ddt": {"a": "-a"}}, "span": [0, 1' + "0" * 5000 + "]}"
    r = post(client, body)
    assert r.status_code == 400 and r.mimetype == PROBLEM
    detail = r.get_json()["detail"]
    assert "5001 digits" in detail and "sys." not in detail and "set_int_max_str_digits" not in detail


def test_an_override_error_points_at_the_parameter_itself(client):
    r = post(client, {**DECAY, "parameters": {"k": "fast"}, "initial": {"a": None}})
    assert r.status_code == 422
    found = pointers(r)
    assert set(found) == {"/parameters/k", "/initial/a"}, found
    assert found["/parameters/k"] == "must be a number"


def test_an_override_that_is_not_an_object_is_refused(client):
    r = post(client, {**DECAY, "parameters": [1, 2]})
    assert r.status_code == 422 and "/parameters" in pointers(r)
