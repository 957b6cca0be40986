"""The parts of the OpenAPI 3.1 document that need no web framework.

``service/openapi_doc.py`` builds the document: it starts from :func:`new_spec` (components
generated from the marshmallow schemas by apispec's MarshmallowPlugin, the shared problem
responses, the bearer security scheme), adds one path per Flask view from the operation
description in the view's docstring (apispec's FlaskPlugin), and ends with :func:`finish`.

What marshmallow holds in code rather than in fields is written here once, as JSON Schema:
the layout of the model language (checked by the engine's reader), "exactly one of" rules,
and the kind-dependent fields of summaries and distributions. Rules no JSON Schema can state
(an expression must parse, names must refer to the model, ``t_end > t_start``, times
increasing, a batch's member count) are listed in ``SEMANTIC_RULES`` and in the JobSpec
description; ``tests/contract`` accepts a 422 for schema-valid data only for those.
"""
from __future__ import annotations

import copy
from typing import Iterable

from apispec import APISpec
from apispec.ext.marshmallow import MarshmallowPlugin
from marshmallow import validate

from schemas.batch import BatchSpecSchema, DistributionSchema, SummarySchema
from schemas.calibration import (OBSERVABLE_NAME, CalibrationCreatedSchema, CalibrationPageSchema,
                                 CalibrationSpecSchema, CalibrationViewSchema, EstimateSchema, NoiseSchema)
from schemas.job import MIN_ATOL, RANK_SUMMARIES, JobSpecSchema
from schemas.problem import PROBLEM_MEDIA_TYPE, ProblemSchema
from schemas.views import (BatchCreatedSchema, BatchPageSchema, BatchStatisticsSchema, BatchTableSchema,
                           BatchViewSchema, CreatedSchema, HealthSchema, JobPageSchema, JobViewSchema,
                           ResultSchema, SpecCheckSchema)

TITLE = "Stifflane"
DESCRIPTION = ("Offloaded stiff ODE integration jobs. Numerical results must be checked by a "
               "qualified person before engineering or clinical decisions.\n\n"
               "Every request under /v1 except /v1/health and /v1/openapi.json needs an API key "
               "in `Authorization: Bearer <key>`. Every error is an RFC 9457 problem document "
               "(`application/problem+json`).")
SECURITY_SCHEME = "bearerAuth"
ID_PATTERN = "^[0-9a-f]{28}$"

# ---- the model language's layout (engine/spec.py, engine/reactions.py reads it; limits from
# engine/limits.py). tests/schemas/test_openapi_doc.py keeps these numbers equal to the engine's.
MAX_NAME_LENGTH = 64
MAX_EXPRESSION_LENGTH = 4000
MAX_STATES = 5000
MAX_PARAMETERS = 5000
MAX_DERIVED = 2000
MAX_REACTIONS = 20000
MAX_EVENTS = 100
MAX_EXPONENT = 1000  # |constant exponent| of a power, so also |n| of an Arrhenius law
RESERVED_NAMES = ("abs", "and", "cos", "cosh", "exp", "if", "log", "log10", "max", "min", "not", "or",
                  "pi", "sign", "sin", "sinh", "sqrt", "step", "t", "tan", "tanh")
EA_UNITS = ("J/mol", "kJ/mol", "cal/mol", "kcal/mol", "K")

PRINTABLE = "^[ -~]+$"  # expressions and equations are printable ASCII
_NAME = {"type": "string", "maxLength": MAX_NAME_LENGTH,
         # a letter or '_' first, then letters, digits, '_'; never two leading underscores
         "pattern": "^([A-Za-z][A-Za-z0-9_]*|_[A-Za-z0-9][A-Za-z0-9_]*|_)$",
         "not": {"enum": list(RESERVED_NAMES)}}
_EXPRESSION = {"description": "an expression of the model language (docs/model-language.md), or a number",
               "anyOf": [{"type": "string", "minLength": 1, "maxLength": MAX_EXPRESSION_LENGTH,
                          "pattern": PRINTABLE},
                         {"type": "number"}]}


def _text(n: int) -> dict:
    return {"type": "string", "maxLength": n}


def _closed(properties: dict, required: Iterable[str] = (), **more) -> dict:
    out = {"type": "object", "properties": properties, "additionalProperties": False, **more}
    if required:
        out["required"] = list(required)
    return out


def _named(values: dict, limit: int, **more) -> dict:
    return {"type": "object", "propertyNames": _NAME, "additionalProperties": values,
            "maxProperties": limit, **more}


MODEL = _closed({
    "title": _text(200),
    "description": _text(2000),
    "states": _named({"anyOf": [
        {"type": "number", "description": "initial value"},
        _closed({"initial": {"type": "number"}, "unit": _text(32), "nonnegative": {"type": "boolean"},
                 "clamped": {"type": "boolean"}, "description": _text(200)})]},
        MAX_STATES, minProperties=1),
    "parameters": _named({"anyOf": [
        {"type": "number"},
        _closed({"value": {"type": "number"}, "unit": _text(32), "description": _text(200)}, ["value"])]},
        MAX_PARAMETERS),
    "derived": _named(_EXPRESSION, MAX_DERIVED),
    "ddt": _named(_EXPRESSION, MAX_STATES),
    "reactions": {"type": "array", "maxItems": MAX_REACTIONS, "items": {
        **_closed({
            "name": {"type": "string", "minLength": 1, "maxLength": MAX_NAME_LENGTH, "pattern": "^[ -~]+$"},
            "equation": {"type": "string", "minLength": 1, "maxLength": MAX_EXPRESSION_LENGTH, "pattern": PRINTABLE,
                         "description": "e.g. '2 A + B -> C' or 'A <=> B'"},
            "k": _EXPRESSION, "k_reverse": _EXPRESSION, "rate": _EXPRESSION,
            "arrhenius": _closed({"A": _EXPRESSION, "n": {"type": "number", "minimum": -MAX_EXPONENT,
                                                                  "maximum": MAX_EXPONENT}, "Ea": {"type": "number"},
                                  "Ea_unit": {"enum": list(EA_UNITS)}, "T": _EXPRESSION}, ["A", "T"]),
            "description": _text(200)}, ["equation"]),
        "oneOf": [{"required": ["k"]}, {"required": ["arrhenius"]}, {"required": ["rate"]}]}},
    "events": {"type": "array", "maxItems": MAX_EVENTS, "items": _closed({
        "name": _NAME, "when": _EXPRESSION, "direction": {"enum": ["rising", "falling", "both"]},
        "stop": {"type": "boolean"}, "description": _text(200)}, ["when"])},
}, ["states"], description="the model: states, parameters, derived, ddt, reactions, events "
                           "(docs/model-language.md)")

_ONE_OF_REQUIRED = lambda *names: [{"required": [n]} for n in names]  # noqa: E731


def _choices(schema, field: str) -> list:
    return list(schema().fields[field].validate.choices)


def _summary_variants() -> list[dict]:
    """SummarySchema's kind-dependent fields (schemas/batch.py, _fields_of_kind) as a oneOf."""
    needs = {"event": ("event",), "at": ("of", "time"), "crossing": ("of", "level", "when")}
    other = [k for k in _choices(SummarySchema, "kind") if k not in needs]
    variants = [(other, ("of",))] + [([k], fields) for k, fields in needs.items()]
    return [{"properties": {"name": {}, "kind": {"enum": kinds}, **{f: {} for f in fields}},
             "required": ["kind", *fields], "additionalProperties": False} for kinds, fields in variants]


def _distribution_variants() -> list[dict]:
    needs = {"uniform": ("low", "high"), "log_uniform": ("low", "high"),
             "normal": ("mean", "std"), "truncated_normal": ("mean", "std", "low", "high")}
    assert set(needs) == set(_choices(DistributionSchema, "distribution"))
    return [{"properties": {"distribution": {"const": kind}, **{f: {} for f in fields}},
             "required": ["distribution", *fields], "additionalProperties": False}
            for kind, fields in needs.items()]


def _rank_variants() -> list[dict]:
    """RankOutputSchema's summary-dependent fields (schemas/job.py, _needs) as a oneOf."""
    needs = {"at": ("t",), "crossing": ("value",)}
    other = [k for k in RANK_SUMMARIES if k not in needs]
    variants = [(other, (), ())] + [([k], fields, ("direction",) if k == "crossing" else ())
                                    for k, fields in needs.items()]
    return [{"properties": {"state": {}, "summary": {"enum": kinds}, **{f: {} for f in (*fields, *optional)}},
             "required": ["state", "summary", *fields], "additionalProperties": False}
            for kinds, fields, optional in variants]


_AXIS = {"description": "a list of values, or evenly spaced values {from, to, count, spacing}",
         "anyOf": [{"type": "array", "items": {"type": "number"}, "minItems": 1, "maxItems": 100_000},
                   _closed({"from": {"type": "number"}, "to": {"type": "number"},
                            "count": {"type": "integer", "minimum": 1, "maximum": 100_000},
                            "spacing": {"enum": ["linear", "log"]}}, ["from", "to", "count"])]}
_BY_TARGET = lambda values: {t: {"type": "object", "propertyNames": _NAME,  # noqa: E731
                                 "additionalProperties": values} for t in ("parameters", "initial")}

# A measurement row of a calibration (schemas/calibration.py, RowField): the time and values by
# observable, null for a missing cell.
_ROW = {"type": "object", "required": ["t"], "properties": {"t": {"type": "number"}},
        "additionalProperties": {"type": ["number", "null"]}}
_OBSERVABLE = {"type": "string", "pattern": OBSERVABLE_NAME, "not": {"enum": ["t", "time"]}}

# Additions to the generated components: JSON Schema keywords merged in, or properties replaced.
REFINEMENTS: dict[str, dict] = {
    "JobSpec": {"properties": {"model": {"$ref": "#/components/schemas/Model"},
                               **_BY_TARGET({"type": "number"})}},
    "Output": {"oneOf": _ONE_OF_REQUIRED("times", "count")},
    "Tolerance": {"properties": {"atol": {
        "description": "absolute tolerance: a positive number, or {state: number, \"*\": default}",
        "anyOf": [{"type": "number", "minimum": MIN_ATOL},
                  {"type": "object", "propertyNames": {"anyOf": [_NAME, {"const": "*"}]},
                   "additionalProperties": {"type": "number", "minimum": MIN_ATOL}}]}}},
    "BatchSpec": {"oneOf": _ONE_OF_REQUIRED("members", "grid", "sample")},
    "Member": {"properties": _BY_TARGET({"type": "number"})},
    "Grid": {"properties": _BY_TARGET(_AXIS)},
    "Sample": {"properties": _BY_TARGET({"$ref": "#/components/schemas/Distribution"})},
    "Distribution": {"oneOf": _distribution_variants()},
    "Summary": {"oneOf": _summary_variants(), "properties": {"of": _NAME, "event": _NAME}},
    "CalibrationSpec": {"properties": {
        "model": {"$ref": "#/components/schemas/Model"},
        "known": {"type": "object", "propertyNames": _NAME, "additionalProperties": {"type": "number"}},
        "observables": {"type": "object", "propertyNames": _OBSERVABLE, "additionalProperties": _NAME,
                        "minProperties": 1, "maxProperties": 100,
                        "description": "observable name -> the state or derived quantity it measures"},
        "noise": {"type": "object", "propertyNames": _OBSERVABLE,
                  "additionalProperties": {"$ref": "#/components/schemas/Noise"},
                  "description": "observable -> {absolute, relative}; an observable without one is "
                                 "unweighted (absolute 1)"}}},
    "Experiment": {"oneOf": _ONE_OF_REQUIRED("data", "csv"),
                   "properties": {**_BY_TARGET({"type": "number"}),
                                  "data": {"type": "array", "minItems": 1, "items": _ROW},
                                  "sigma": {"type": "array", "minItems": 1, "items": _ROW}}},
    "Unknown": {"properties": {"name": {"type": "string", "minLength": 1, "maxLength": 69,
                                        "description": "a parameter, or init:<state> for an initial value"}}},
    "RankOutput": {"oneOf": _rank_variants(), "properties": {"state": _NAME}},
    # RFC 9457: extension members (errors, state) are allowed; type, title and status always come.
    "Problem": {"additionalProperties": True, "required": ["type", "title", "status"],
                "properties": {"type": {"type": "string", "format": "uri"}}},
}

# Rules of the job and batch specs that no JSON Schema states: a schema-valid body may still get
# a 422 for these (and only these). (pointer pattern, detail pattern) pairs; "(base/)?" covers the
# batch's base job. The contract tests hold the server to this list.
SEMANTIC_RULES: tuple[tuple[str, str], ...] = (
    # the model language: an expression must parse and use known names; keys and names must agree
    (r"^/(base/)?model/(ddt|derived)/[^/]+$", r""),
    (r"^/(base/)?model/reactions/\d+/(equation|k|k_reverse|rate|arrhenius/A|arrhenius/T)$", r""),
    (r"^/(base/)?model/reactions/\d+/name$", r"unique"),
    (r"^/(base/)?model/events/\d+/when$", r""),
    (r"^/(base/)?model/events/\d+/name$", r"used twice"),
    (r"^/(base/)?model/(states|parameters|derived)/[^/]+$", r"already defined"),
    (r"^/(base/)?model$", r"cannot be prepared: constant|non-zero entries|instructions|stoichiometric"),
    (r"^/(base/)?model/reactions/\d+/arrhenius$", r"rate constant"),  # T**n or exp overflows
    (r"^/(base/)?model/reactions$", r"stoichiometric entries"),
    # relations between fields
    (r"^/(base/)?span$", r"t_end must be greater|overflows float64"),
    (r"^/(base/)?output/times$", r"increasing|span"),
    (r"^/(base/)?output/first$", r"span"),
    (r"^/(base/)?(initial|parameters)/[^/]+$", r"is not a (state|parameter)"),
    (r"^/(base/)?tolerance/atol/[^/]+$", r"is not a state"),
    (r"^/(base/)?sensitivity/(parameters|initial)/\d+$", r"is not a (parameter|state)|named twice"),
    (r"^/(base/)?sensitivity/parameters$", r"at least one|at most"),
    (r"^/base/sensitivity$", r"single jobs"),
    (r"^/(base/)?sensitivity/(parameters|initial)(/\d+)?$",
     r"is not a (state|parameter)|named twice|at least one|at most"),
    (r"^/(base/)?sensitivity/rank/\d+/(state|t)$", r"is not a state|must lie in the span"),
    (r"^/(base/)?output$", r"output points"),               # more points than the server's cap
    (r"^/(members|grid|sample)(/.*)?$", r"is not a (parameter|state)|at most|give at least one"),
    (r"^/grid/(parameters|initial)/[^/]+$", r"log spacing"),
    (r"^/sample/(parameters|initial)/[^/]+/(high|low)$", r"greater than|positive"),
    (r"^/summaries(/.*)?$", r"is not a|must lie in the span|unique"),
    (r"^/trajectories$", r"trajectory values"),
    # calibrations (schemas/calibration.py): names against the model, measurements against spans
    # and observables, bounds, sigma, the server's limits; CSV text is read only by the server
    (r"^/experiments/\d+/(initial|parameters)/[^/]*$", r"is not a (state|parameter)|is estimated"),
    (r"^/experiments/\d+/span$", r"t_end must be greater"),
    (r"^/experiments/\d+/name$", r"is the name of"),
    (r"^/experiments/\d+/csv$", r"^line \d+"),
    (r"^/experiments/\d+/(data|csv)$", r"no observable columns|measurement rows"),
    (r"^/experiments/\d+/data/\d+/[^/]*$", r"outside the experiment's span|is not an observable|sigma is 0"),
    (r"^/experiments/\d+/sigma(/\d+/[^/]*)?$", r"rows but the data has|but data row|not a measured observable|"
                                                r"must be positive"),
    (r"^/experiments$", r"no measured value|at most"),
    (r"^/observables/[^/]*$", r"is not a state or derived|names the time column"),
    (r"^/noise/[^/]*$", r"is not an observable|zero sigma"),
    (r"^/unknowns(/\d+/(name|upper|lower|start))?$", r"is not a (parameter|state)|estimated twice|crossed|"
                                                     r"log scale|within the bounds|at most|measured values"),
    (r"^/known/[^/]*$", r"is not a parameter|is estimated"),
    (r"^/starts$", r"at most"),
)

_RESPONSES = {
    "BadRequest": (400, "malformed request: JSON syntax, query arguments, a credential in the URL"),
    "Unauthorized": (401, "no API key, or a key that is unknown or revoked"),
    "Forbidden": (403, "the key is valid but its role may not do this"),
    "NotFound": (404, "no such resource for this key (another owner's resources are 404 alike)"),
    "NotAcceptable": (406, "none of the offered formats is acceptable (format= or Accept)"),
    "Conflict": (409, "the resource's state does not allow this now, or a request with this "
                      "Idempotency-Key is still running"),
    "PayloadTooLarge": (413, "the body is larger than the server's limit"),
    "UnsupportedMediaType": (415, "the body must be application/json"),
    "UnprocessableContent": (422, "the body is well-formed JSON but invalid; `errors` lists JSON "
                                  "pointers into it with what is wrong and what is allowed"),
    "TooManyRequests": (429, "over the key's request rate or its active-job quota; retry after "
                             "Retry-After seconds"),
    "ServiceUnavailable": (503, "the job store (Redis) cannot be reached; retry shortly"),
}
_RESPONSE_HEADERS = {401: {"WWW-Authenticate": "WWWAuthenticate"},
                     429: {"Retry-After": "RetryAfter", "RateLimit-Limit": "RateLimitLimit",
                           "RateLimit-Remaining": "RateLimitRemaining", "RateLimit-Reset": "RateLimitReset"},
                     503: {"Retry-After": "RetryAfter"}}
RESPONSE_NAMES = {status: name for name, (status, _) in _RESPONSES.items()}

_HEADERS = {
    "WWWAuthenticate": {"description": "the auth scheme to use", "required": True,
                        "schema": {"type": "string"}},
    "RetryAfter": {"description": "seconds to wait before retrying", "required": True,
                   "schema": {"type": "integer", "minimum": 0}},
    "RateLimitLimit": {"description": "requests allowed per window", "schema": {"type": "integer"}},
    "RateLimitRemaining": {"description": "requests left in this window", "schema": {"type": "integer"}},
    "RateLimitReset": {"description": "seconds until the window resets", "schema": {"type": "integer"}},
    "Location": {"description": "URL of the new resource", "required": True, "schema": {"type": "string"}},
    "ETag": {"description": "entity tag of the job's current revision (If-None-Match)",
             "schema": {"type": "string"}},
}
_PARAMETERS = {
    "JobId": {"name": "job_id", "in": "path", "required": True,
              "schema": {"type": "string", "pattern": ID_PATTERN}},
    "BatchId": {"name": "batch_id", "in": "path", "required": True,
                "schema": {"type": "string", "pattern": ID_PATTERN}},
    "CalibrationId": {"name": "calibration_id", "in": "path", "required": True,
                      "schema": {"type": "string", "pattern": ID_PATTERN}},
    "Limit": {"name": "limit", "in": "query", "description": "page size (default 50)",
              "schema": {"type": "integer", "minimum": 1, "maximum": 200}},
    "Cursor": {"name": "cursor", "in": "query",
               "description": "the next_cursor of the previous page (also in its Link: rel=next)",
               "schema": {"type": "string", "pattern": ID_PATTERN}},
    "Format": {"name": "format", "in": "query", "description": "overrides Accept",
               "schema": {"type": "string", "enum": ["json", "csv", "npz"]}},
    "IdempotencyKey": {"name": "Idempotency-Key", "in": "header",
                       "description": "makes a retried POST safe: the same key and body return the "
                                      "first reply (24 h); another body is 422, a retry while the "
                                      "first runs is 409",
                       "schema": {"type": "string", "pattern": "^[ -~]{1,200}$"}},
}

SCHEMAS = {"JobSpec": JobSpecSchema, "JobView": JobViewSchema, "JobPage": JobPageSchema,
           "Created": CreatedSchema, "Result": ResultSchema, "SpecCheck": SpecCheckSchema,
           "Health": HealthSchema, "Problem": ProblemSchema, "BatchSpec": BatchSpecSchema,
           "Distribution": DistributionSchema,
           "BatchView": BatchViewSchema, "BatchPage": BatchPageSchema, "BatchCreated": BatchCreatedSchema,
           "BatchTable": BatchTableSchema, "BatchStatistics": BatchStatisticsSchema,
           "CalibrationSpec": CalibrationSpecSchema, "CalibrationView": CalibrationViewSchema,
           "CalibrationPage": CalibrationPageSchema, "CalibrationCreated": CalibrationCreatedSchema,
           "Noise": NoiseSchema, "Estimate": EstimateSchema}


def exclusive_bounds(self, field, ret, **kwargs) -> dict:
    """apispec attribute function: a Range with ``min_inclusive=False`` (or max) is an exclusive
    bound (apispec writes every bound as inclusive)."""
    for validator in field.validators:
        if isinstance(validator, validate.Range):
            for bound, inclusive, name in ((validator.min, validator.min_inclusive, "minimum"),
                                           (validator.max, validator.max_inclusive, "maximum")):
                if bound is not None and not inclusive and name in ret:
                    ret["exclusive" + name.capitalize()] = ret.pop(name)
    return {}


def new_spec(version: str, plugins: Iterable = ()) -> APISpec:
    """An APISpec with every component; paths are added by the caller (service/openapi_doc.py)."""
    marshmallow = MarshmallowPlugin()
    spec = APISpec(title=TITLE, version=version, openapi_version="3.1.0",
                   plugins=[*plugins, marshmallow], info={"description": DESCRIPTION})
    marshmallow.converter.add_attribute_function(exclusive_bounds)
    spec.components.security_scheme(SECURITY_SCHEME, {
        "type": "http", "scheme": "bearer",
        "description": "an API key (slk_...) made with `stifflane keys create`"})
    spec.components.schema("Model", component=copy.deepcopy(MODEL))
    for name, schema in SCHEMAS.items():
        spec.components.schema(name, schema=schema)
    for name, header in _HEADERS.items():
        spec.components.header(name, header)
    for name, parameter in _PARAMETERS.items():
        spec.components.parameter(name, parameter["in"], parameter)
    for name, (status, description) in _RESPONSES.items():
        response = {"description": description,
                    "content": {PROBLEM_MEDIA_TYPE: {"schema": "Problem"}}}
        if status in _RESPONSE_HEADERS:
            response["headers"] = dict(_RESPONSE_HEADERS[status])
        spec.components.response(name, response)
    return spec


def problem_ref(status: int) -> dict:
    return {"$ref": f"#/components/responses/{RESPONSE_NAMES[status]}"}


def finish(doc: dict) -> dict:
    """Apply :data:`REFINEMENTS` to the generated components (returns ``doc``)."""
    schemas = doc["components"]["schemas"]
    for name, extra in REFINEMENTS.items():
        target = schemas[name]
        for key, value in extra.items():
            if key == "properties":
                target.setdefault("properties", {}).update(copy.deepcopy(value))
            else:
                target[key] = copy.deepcopy(value)
    doc["security"] = [{SECURITY_SCHEME: []}]
    return doc
