"""The client without a server: retries, problem details, specs from Python data, results."""
import json

import numpy as np
import pytest
import requests

from stifflane_client import ApiError, Client, InvalidSpec, Model, Result, job_spec, load_spec
from stifflane_client.transport import retry_delay


class FakeResponse:
    def __init__(self, status, body=None, headers=None):
        self.status_code = status
        self._body = body
        self.headers = headers or {}
        self.reason = "reason"
        self.text = json.dumps(body) if body is not None else ""
        self.links = {}

    def json(self):
        if self._body is None:
            raise ValueError("no body")
        return self._body


class FakeSession:
    """Answers from a script and records each request."""

    def __init__(self, script):
        self.script = list(script)
        self.calls = []

    def request(self, method, url, **kw):
        self.calls.append((method, url, kw))
        item = self.script.pop(0)
        if isinstance(item, Exception):
            raise item
        return item


def client_with(script, **kw):
    waits = []
    session = FakeSession(script)
    return Client("http://test", session=session, sleep=waits.append, **kw), session, waits


def test_retry_after_seconds_are_respected_and_capped():
    assert retry_delay(1, "3") == 3.0
    assert retry_delay(1, "1000") == 30.0
    assert 0.25 <= retry_delay(1, None) <= 0.5      # base 0.5 s with jitter in [0.5, 1]
    assert 2.0 <= retry_delay(4, "a date") <= 4.0  # unparsable: backoff


def test_submit_retries_429_and_503_with_the_same_idempotency_key():
    created = {"id": "j1", "state": "queued", "links": {}}
    c, session, waits = client_with([FakeResponse(429, {"title": "Too Many Requests"}, {"Retry-After": "2"}),
                                     FakeResponse(503, {"title": "Unavailable"}),
                                     requests.ConnectionError("reset"),
                                     FakeResponse(202, created)])
    job = c.submit({"model": {}, "span": [0, 1]})
    assert job.id == "j1"
    keys = {call[2]["headers"]["Idempotency-Key"] for call in session.calls}
    assert len(session.calls) == 4 and len(keys) == 1
    assert waits[0] == 2.0


def test_each_submit_has_its_own_idempotency_key():
    created = {"id": "j", "state": "queued", "links": {}}
    c, session, _ = client_with([FakeResponse(202, created), FakeResponse(202, created)])
    c.submit({"span": [0, 1]})
    c.submit({"span": [0, 1]})
    a, b = (call[2]["headers"]["Idempotency-Key"] for call in session.calls)
    assert a != b


def test_problem_details_become_attributes_of_the_exception():
    problem = {"type": "https://stifflane.invalid/problems/invalid-spec", "title": "Invalid job spec",
               "status": 422, "detail": "1 problem(s)",
               "errors": [{"pointer": "/span", "detail": "t_end must be greater than t_start"}]}
    c, _, _ = client_with([FakeResponse(422, problem)])
    with pytest.raises(InvalidSpec) as info:
        c.validate({"span": [1, 0]})
    e = info.value
    assert isinstance(e, ApiError)
    assert (e.status, e.title, e.type) == (422, "Invalid job spec", problem["type"])
    assert e.errors == problem["errors"] and "/span" in str(e)


def test_a_bearer_key_is_sent_when_given(monkeypatch):
    monkeypatch.setenv("STIFFLANE_KEY", "slk_from_env")
    c, session, _ = client_with([FakeResponse(200, {"status": "ok"})])
    c.health()
    assert session.calls[0][2]["headers"]["Authorization"] == "Bearer slk_from_env"


def test_a_model_in_python_data_becomes_a_job_spec():
    model = Model(title="decay", states={"A": 1.0}, parameters={"k": {"value": 2.0}}, ddt={"A": "-k * A"})
    spec = job_spec(model, (0, 5), count=11, spacing="log", rtol=1e-8, method="radau_iia_5", label="demo",
                    machine_code="always")
    assert spec == {"model": {"states": {"A": 1.0}, "title": "decay", "parameters": {"k": {"value": 2.0}},
                              "ddt": {"A": "-k * A"}},
                    "span": [0.0, 5.0], "output": {"count": 11, "spacing": "log"},
                    "tolerance": {"rtol": 1e-8}, "method": "radau_iia_5", "label": "demo",
                    "machine_code": "always"}


def test_specs_load_from_files_and_text_but_never_with_nan(tmp_path):
    path = tmp_path / "s.json"
    path.write_text('{"span": [0, 1]}')
    assert load_spec(path) == load_spec(str(path)) == load_spec('{"span": [0, 1]}') == {"span": [0, 1]}
    with pytest.raises(ValueError, match="NaN"):
        load_spec('{"span": [0, NaN]}')


def test_results_turn_json_nulls_into_nan_and_name_their_columns():
    body = {"id": "j", "outcome": "succeeded", "message": "", "times": [0.0, 1.0],
            "states": {"A": [1.0, None], "B": [0.0, 0.5]}, "derived": {"r": [2.0, 3.0]}, "report": {}}
    r = Result.from_json(body)
    assert r.columns == ["t", "A", "B", "r"]
    assert np.isnan(r["A"][1]) and r["B"][1] == 0.5 and r["r"][0] == 2.0
    assert r.table().shape == (2, 4)
    frame = pytest.importorskip("pandas") and r.to_dataframe()
    assert list(frame.columns) == ["A", "B", "r"] and frame.index.name == "t"


def test_polls_send_the_last_etag_and_a_304_keeps_the_last_view():
    view = {"id": "j1", "state": "running", "progress": 0.5}
    c, session, _ = client_with([FakeResponse(200, view, {"ETag": '"j1-7"'}), FakeResponse(304)])
    assert c.job("j1").view == view
    again = c.job("j1")
    assert session.calls[1][2]["headers"]["If-None-Match"] == '"j1-7"'
    assert again.view == view


def test_how_a_job_ended_reads_as_one_plain_sentence():
    from stifflane_client import ending

    # before: "job cancelled: cancelled cancelled on request" and "job failed: step_underflow the step..."
    assert ending({"id": "j1", "state": "cancelled", "outcome": "cancelled",
                   "message": "cancelled on request at t=0.5"}) == "job j1 was cancelled on request at t=0.5."
    assert ending({"id": "j1", "state": "cancelled", "outcome": "cancelled",
                   "message": "cancelled before it started"}) == "job j1 was cancelled before it started."
    assert ending({"id": "j2", "state": "failed", "outcome": "step_underflow",
                   "message": "the step size fell to the round-off limit at t=1"}) == \
        "job j2 failed: the step size fell to the round-off limit at t=1."
    assert ending({"id": "j3", "state": "failed", "outcome": "worker_lost", "message": ""}) == \
        "job j3 failed (worker_lost)."


def test_a_partial_result_says_so_and_where_it_stopped():
    body = {"id": "j", "state": "failed", "partial": True, "t_reached": 1.0, "t_end": 2.0,
            "outcome": "step_underflow", "message": "m", "times": [0.0, 1.0], "states": {"y": [1.0, 9.0]},
            "derived": {}, "units": {"y": "mol/L"}, "events": [{"name": "e", "t": 0.5, "states": {"y": 2.0}}]}
    res = Result.from_json(body)
    assert res.partial and res.t_reached == 1.0 and res.units == {"y": "mol/L"} and res.events[0]["name"] == "e"
    old = Result.from_json({"id": "j", "times": [0.0], "states": {"y": [1.0]}, "derived": {}})
    assert not old.partial and old.units == {} and old.t_reached is None
