"""Property-based requests generated from the served OpenAPI document (schemathesis), with
authentication and rate limits on, as a deployment runs.

Every request carries a real API key (made through jobs/accounts.py); the rate limit is high
enough for the run, and a 429 would still have to conform to the document. No response may be
a 5xx; every response (status, headers, body) must conform to the document; schemathesis's
auth check proves each secured operation refuses a request without a key or with a wrong one.

Schema-valid data must be accepted, except for the rules a JSON Schema cannot state
(schemas.openapi.SEMANTIC_RULES: the model language, names that must refer to the model,
t_end > t_start, ...): a 422 for schema-valid data must name only those. Cases per operation:
STIFFLANE_CONTRACT_EXAMPLES (default 100; raise it for a nightly run).
"""
import os
import re
import uuid

import pytest
import schemathesis
from hypothesis import HealthCheck, assume, given, settings
from hypothesis.errors import Unsatisfiable
from schemathesis import GenerationMode
from schemathesis import checks
from schemathesis.core.failures import Failure

from schemas.openapi import SEMANTIC_RULES

EXAMPLES = int(os.environ.get("STIFFLANE_CONTRACT_EXAMPLES", "100"))
RATE_LIMIT = 100_000  # per window; the run sends a few thousand requests
CASES = {"run": 0}


@pytest.fixture(scope="module")
def contract_app(redis_server):
    from jobs import accounts
    from jobs.settings import Settings
    from service import create_app

    tag = uuid.uuid4().hex[:8]
    settings = Settings(redis_url=redis_server.url, key_prefix=f"c{tag}", auth_mode="keys",
                        interactive_queue=f"stifflane.contract.{tag}", batch_queue=f"stifflane.contract.{tag}.b",
                        rate_limit=RATE_LIMIT, address_rate_limit=RATE_LIMIT)
    app = create_app(settings)
    store = app.extensions["stifflane"].store
    _, key = accounts.create_key(store.r, store.keys, "contract", "admin", label="contract tests")
    return app, {"Authorization": f"Bearer {key}"}


@pytest.fixture(scope="module")
def api_schema(contract_app):
    app, _ = contract_app
    schema = schemathesis.openapi.from_wsgi("/v1/openapi.json", app)
    # 413 (body over the size limit) refuses invalid data too: an over-long array can be one
    rejection = schema.config.checks.negative_data_rejection
    rejection.expected_statuses = [*rejection.expected_statuses, "413"]
    return schema


def _operations():
    from jobs.settings import Settings
    from service import create_app
    from service.openapi_doc import build

    doc = build(create_app(Settings(redis_url="redis://127.0.0.1:1/0")), "contract")
    return [(method.upper(), path) for path, ops in doc["paths"].items() for method in ops]


OPERATIONS = _operations()


class SemanticRefusal(Failure):
    pass


def _semantic(error: dict) -> bool:
    return any(re.match(p, error.get("pointer", "")) and re.search(d, error.get("detail", ""))
               for p, d in SEMANTIC_RULES)


def schema_valid_data_is_accepted(ctx, response, case):
    """Like schemathesis's positive_data_acceptance, but a 422 may name the rules in SEMANTIC_RULES."""
    meta = case.meta
    if meta is None or not meta.generation.mode.is_positive:
        return None
    status = response.status_code
    if status < 400 or status in (401, 404, 409, 429) or status >= 500:  # 5xx: not_a_server_error's job
        return None
    try:
        body = response.json()
    except ValueError:
        body = {}
    if status == 422 and body.get("type", "").endswith("/idempotency-mismatch"):
        return None  # a generated Idempotency-Key used again with another body: documented
    errors = body.get("errors") or []
    if status == 422 and errors and all(_semantic(e) for e in errors):
        return None
    raise SemanticRefusal(operation=case.operation.label, title="Schema-valid data refused",
                          message=f"{status} for data the document allows: "
                                  f"{[e for e in errors if not _semantic(e)] or body}")


@pytest.mark.parametrize("method, path", OPERATIONS, ids=[f"{m} {p}" for m, p in OPERATIONS])
def test_every_operation_conforms_and_never_fails_with_5xx(api_schema, contract_app, method, path):
    _, auth = contract_app
    operation = api_schema[path][method]

    @given(case=operation.as_strategy())
    @settings(max_examples=EXAMPLES, deadline=None, derandomize=True, database=None,
              suppress_health_check=list(HealthCheck))
    def check(case):
        CASES["run"] += 1
        case.call_and_validate(headers=auth, excluded_checks=[checks.positive_data_acceptance],
                               additional_checks=[schema_valid_data_is_accepted])

    check()


@pytest.mark.parametrize("method, path", OPERATIONS, ids=[f"{m} {p}" for m, p in OPERATIONS])
def test_requests_the_document_forbids_are_refused(api_schema, contract_app, method, path):
    """Negative cases: a body, query or path that breaks the document gets a 4xx, never a 2xx."""
    _, auth = contract_app
    operation = api_schema[path][method]

    @given(case=operation.as_strategy(generation_mode=GenerationMode.NEGATIVE))
    @settings(max_examples=EXAMPLES // 2, deadline=None, derandomize=True, database=None,
              suppress_health_check=list(HealthCheck))
    def check(case):
        # a query value of [] or None is not sent at all (the HTTP client drops it), so such a
        # "negative" case arrives as a valid request; it was answered 200, rightly
        assume(all(v not in (None, [], {}) for v in (case.query or {}).values()))
        CASES["run"] += 1
        case.call_and_validate(headers=auth)

    try:
        check()
    except Unsatisfiable:
        pytest.skip("the operation takes no input that could be made invalid")


def test_zz_report_the_number_of_cases(capsys):
    with capsys.disabled():
        print(f"\ncontract cases run: {CASES['run']}")
