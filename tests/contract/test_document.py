"""The generated OpenAPI document: what it declares, and the places where it once disagreed with
the server (each found by the contract tests; each test failed before its fix)."""
import dataclasses
import json

import jsonschema_rs
import pytest

from jobs import accounts
from schemas import openapi
from tests.service.test_jobs_api import DECAY

SECURED_RESPONSES = {"400", "401", "429", "503"}


@pytest.fixture
def secured(settings, store):
    from service import create_app

    app = create_app(dataclasses.replace(settings, auth_mode="keys", rate_limit=1000), store=store)
    _, key = accounts.create_key(store.r, store.keys, "ana")
    return app, {"Authorization": f"Bearer {key}"}


@pytest.fixture
def doc(client):
    return client.get("/v1/openapi.json").get_json()


def validator(doc: dict, name: str):
    """A JSON Schema validator for one component, resolving refs inside the document."""
    return jsonschema_rs.Draft202012Validator(
        {"$ref": f"#/components/schemas/{name}", "components": doc["components"]})


def operations(doc):
    for path, ops in doc["paths"].items():
        for method, op in ops.items():
            yield path, method, op


def test_the_document_declares_bearer_keys_and_only_health_and_itself_are_public(secured):
    app, _ = secured
    doc = app.test_client().get("/v1/openapi.json").get_json()
    assert doc["components"]["securitySchemes"]["bearerAuth"] == {
        "type": "http", "scheme": "bearer",
        "description": doc["components"]["securitySchemes"]["bearerAuth"]["description"]}
    assert doc["security"] == [{"bearerAuth": []}]
    public = {path for path, _, op in operations(doc) if op.get("security") == []}
    assert public == {"/v1/health", "/v1/openapi.json"}
    assert all("400" in op["responses"] for _, _, op in operations(doc))  # unknown query parameters


def test_every_secured_operation_documents_the_auth_responses_as_problem_json(secured):
    app, _ = secured
    doc = app.test_client().get("/v1/openapi.json").get_json()
    for path, method, op in operations(doc):
        if op.get("security") == []:
            continue
        assert SECURED_RESPONSES <= set(op["responses"]), (method, path)
        for status, response in op["responses"].items():
            if status.startswith("4") or status.startswith("5"):
                name = response["$ref"].rsplit("/", 1)[1]
                content = doc["components"]["responses"][name]["content"]
                assert list(content) == ["application/problem+json"], (method, path, status)
    assert doc["components"]["responses"]["Unauthorized"]["headers"]["WWW-Authenticate"]
    assert doc["components"]["responses"]["TooManyRequests"]["headers"]["Retry-After"]


def test_problem_schema_follows_rfc_9457(doc):
    problem = validator(doc, "Problem")
    assert problem.is_valid({"type": "https://x.invalid/p", "title": "t", "status": 409, "state": "running"})
    assert not problem.is_valid({"title": "no type or status"})


def test_a_real_401_and_429_conform_to_the_document(settings, store):
    """Rate limits on: the third request in the window is refused, as documented."""
    import schemathesis

    from service import create_app

    app = create_app(dataclasses.replace(settings, auth_mode="keys", rate_limit=2), store=store)
    _, key = accounts.create_key(store.r, store.keys, "rita")
    schema = schemathesis.openapi.from_wsgi("/v1/openapi.json", app)
    operation = schema["/v1/jobs"]["GET"]
    c = app.test_client()
    r401 = c.get("/v1/jobs")
    assert r401.status_code == 401 and operation.is_valid_response(r401)
    replies = [c.get("/v1/jobs", headers={"Authorization": f"Bearer {key}"}) for _ in range(3)]
    assert [r.status_code for r in replies] == [200, 200, 429]
    r429 = replies[-1]
    assert r429.mimetype == "application/problem+json" and int(r429.headers["Retry-After"]) >= 0
    assert operation.is_valid_response(r429)
    doc = c.get("/v1/openapi.json").get_json()
    assert validator(doc, "Problem").is_valid(r429.get_json())


# ---- places where the hand-written document allowed what the server refused

def test_an_integral_number_is_an_integer_as_json_schema_says(client):
    """JSON Schema's "integer" admits 9664.0; the server refused it ("Not a valid integer")."""
    spec = dict(DECAY, limits={"max_steps": 9664.0}, output={"count": 11.0})
    r = client.post("/v1/spec-checks", json=spec)
    assert r.status_code == 200, r.get_json()
    assert client.post("/v1/spec-checks", json=dict(DECAY, limits={"max_steps": 96.5})).status_code == 422


def test_the_cursor_is_documented_as_the_id_the_server_wants(doc, client):
    cursor = doc["components"]["parameters"]["Cursor"]["schema"]
    assert cursor["pattern"] == openapi.ID_PATTERN
    assert client.get("/v1/jobs?cursor=load_default").status_code == 400


def test_the_model_layout_is_in_the_document(doc, client):
    """The document said only "an object with states"; the reader refuses much more."""
    model = validator(doc, "Model")
    assert model.is_valid(DECAY["model"])
    refused = [{"states": None}, {"states": {}}, {"states": {"a": 1}, "colour": "red"},
               {"states": {"t": 1.0}}, {"states": {"a": "one"}}, {"states": {"a": 1}, "ddt": {"a": "-a\x00"}},
               {"states": {"a": 1}, "reactions": [{"equation": "a -> b", "k": 1, "rate": "a"}]},
               {"states": {"__a": 1}}]
    for m in refused:
        assert not model.is_valid(m), m
        r = client.post("/v1/spec-checks", json=dict(DECAY, model=m))
        assert r.status_code == 422, m


def test_exclusive_bounds_are_exclusive_in_the_document(doc, client):
    """output.first must be > 0: the document said >= 0."""
    first = doc["components"]["schemas"]["Output"]["properties"]["first"]
    assert first.get("exclusiveMinimum") == 0 and "minimum" not in first
    spec = dict(DECAY, output={"count": 5, "spacing": "log", "first": 0.0})
    assert client.post("/v1/spec-checks", json=spec).status_code == 422


def test_override_and_tolerance_keys_are_names(doc):
    job = validator(doc, "JobSpec")
    assert job.is_valid(dict(DECAY, tolerance={"atol": {"*": 1e-9, "a": 1e-12}}))
    assert not job.is_valid(dict(DECAY, tolerance={"atol": {"": 1e-9}}))
    assert not job.is_valid(dict(DECAY, initial={"": 1.0}))


def test_a_model_whose_constant_overflows_is_a_422_not_a_500(client):
    """Found by the contract run: an Arrhenius law with a numeric T and a large n overflowed
    while the model was read, and the error escaped as a 500."""
    model = {"states": {"a": 1.0, "b": 0.0},
             "reactions": [{"equation": "a -> b", "arrhenius": {"A": 1.0, "n": 194.0, "T": 1e50}}]}
    r = client.post("/v1/spec-checks", json=dict(DECAY, model=model))
    assert r.status_code == 422, r.get_data(as_text=True)
    assert r.get_json()["errors"][0]["pointer"] == "/model/reactions/0/arrhenius"


def test_the_engine_reader_reports_an_overflowing_arrhenius_law_as_an_issue():
    from engine.language.check import check_model

    model = {"states": {"a": 1.0, "b": 0.0},
             "reactions": [{"equation": "a -> b", "arrhenius": {"A": 1.0, "n": 194.0, "T": 1e50}}]}
    assert check_model(model)


def test_query_parameters_the_document_does_not_list_are_refused(secured):
    """A misspelt ?limt=5 was silently ignored (schemathesis' negative cases)."""
    app, auth = secured
    c = app.test_client()
    r = c.get("/v1/jobs?limt=5", headers=auth)
    assert r.status_code == 400 and r.get_json()["errors"] == [
        {"pointer": "/query/limt", "detail": "not a parameter of this operation"}]
    assert c.get("/v1/jobs?limit=5&state=queued", headers=auth).status_code == 200
    assert c.get("/v1/health?verbose=1").status_code == 400
    assert c.get("/v1/jobs?api_key=x", headers=auth).get_json()["type"].endswith("/key-in-url")


def test_a_query_parameter_given_twice_is_refused(secured):
    """?limit=1&limit=500 was answered with the first value (common practice: refuse ambiguity)."""
    app, auth = secured
    r = app.test_client().get("/v1/jobs?limit=1&state=queued&limit=500", headers=auth)
    assert r.status_code == 400 and r.get_json()["errors"] == [
        {"pointer": "/query/limit", "detail": "given more than once"}]


def test_the_models_limits_in_the_document_are_the_engines():
    from engine.language import names, reactions
    from engine.language.limits import DEFAULT_LIMITS as L

    assert set(openapi.RESERVED_NAMES) == set(names.RESERVED)
    assert set(openapi.EA_UNITS) == set(reactions.EA_UNITS)
    assert (openapi.MAX_NAME_LENGTH, openapi.MAX_EXPRESSION_LENGTH, openapi.MAX_STATES, openapi.MAX_PARAMETERS,
            openapi.MAX_DERIVED, openapi.MAX_REACTIONS, openapi.MAX_EVENTS, openapi.MAX_EXPONENT) == (
        L.max_name_length, L.max_expression_length, L.max_states, L.max_parameters, L.max_derived,
        L.max_reactions, L.max_events, L.max_exponent)


def test_every_example_spec_is_valid_against_the_document(doc):
    from tests.conftest import example_path

    schemas = {"jobs": validator(doc, "JobSpec"), "models": validator(doc, "Model"),
               "calibrations": validator(doc, "CalibrationSpec")}
    paths = sorted(example_path().rglob("*.json"))
    assert len(paths) >= 2
    for path in paths:
        errors = [e.message for e in schemas[path.parent.name].iter_errors(json.loads(path.read_text()))]
        assert not errors, (path.name, errors[:3])
