"""The OpenAPI 3.1 document, generated from the marshmallow schemas."""
from __future__ import annotations

from apispec import APISpec
from apispec.ext.marshmallow import MarshmallowPlugin

from schemas.job import JobSpecSchema
from schemas.problem import PROBLEM_MEDIA_TYPE, ProblemSchema
from schemas.views import CreatedSchema, HealthSchema, JobPageSchema, JobViewSchema, ResultSchema

_PROBLEM = {"description": "problem details (RFC 9457)",
            "content": {PROBLEM_MEDIA_TYPE: {"schema": "Problem"}}}
_JOB_ID = {"name": "job_id", "in": "path", "required": True,
           "schema": {"type": "string", "pattern": "^[0-9a-f]{28}$"}}


def _json(schema: str, description: str) -> dict:
    return {"description": description, "content": {"application/json": {"schema": schema}}}


def build_openapi(version: str) -> dict:
    spec = APISpec(title="Stifflane", version=version, openapi_version="3.1.0",
                   plugins=[MarshmallowPlugin()],
                   info={"description": "Offloaded stiff ODE integration jobs. Numerical results "
                                        "must be checked by a qualified person before engineering "
                                        "or clinical decisions."})
    for name, schema in [("JobSpec", JobSpecSchema), ("JobView", JobViewSchema),
                         ("JobPage", JobPageSchema), ("Created", CreatedSchema),
                         ("Result", ResultSchema), ("Health", HealthSchema),
                         ("Problem", ProblemSchema)]:
        spec.components.schema(name, schema=schema)
    errors = {str(code): _PROBLEM for code in (400, 404, 405, 406, 409, 413, 415, 422, 503)}
    spec.path(path="/v1/jobs", operations={
        "post": {"summary": "Create an integration job", "operationId": "createJob",
                 "requestBody": {"required": True,
                                 "content": {"application/json": {"schema": "JobSpec"}}},
                 "responses": {"202": _json("Created", "accepted; poll the Location"),
                               **{k: errors[k] for k in ("400", "413", "415", "422", "503")}}},
        "get": {"summary": "List jobs, newest first", "operationId": "listJobs",
                "parameters": [
                    {"name": "state", "in": "query", "schema": {
                        "type": "string", "enum": ["queued", "running", "succeeded", "failed", "cancelled"]}},
                    {"name": "limit", "in": "query", "schema": {"type": "integer", "minimum": 1, "maximum": 200}},
                    {"name": "cursor", "in": "query", "schema": {"type": "string"}}],
                "responses": {"200": _json("JobPage", "a page of jobs; Link: rel=next"),
                              "400": errors["400"]}}})
    spec.path(path="/v1/jobs/{job_id}", operations={
        "get": {"summary": "Read a job", "operationId": "getJob", "parameters": [_JOB_ID],
                "responses": {"200": _json("JobView", "the job"), "304": {"description": "unchanged"},
                              "404": errors["404"]}}})
    spec.path(path="/v1/jobs/{job_id}/result", operations={
        "get": {"summary": "Read a succeeded job's result", "operationId": "getResult",
                "parameters": [_JOB_ID, {"name": "format", "in": "query",
                                         "schema": {"type": "string", "enum": ["json", "csv", "npz"]}}],
                "responses": {"200": {"description": "the result",
                                      "content": {"application/json": {"schema": "Result"},
                                                  "text/csv": {"schema": {"type": "string"}},
                                                  "application/x-npz": {"schema": {"type": "string",
                                                                                   "format": "binary"}}}},
                              **{k: errors[k] for k in ("404", "406", "409")}}}})
    spec.path(path="/v1/jobs/{job_id}/spec", operations={
        "get": {"summary": "The job spec as submitted", "operationId": "getSpec", "parameters": [_JOB_ID],
                "responses": {"200": _json("JobSpec", "the spec"), "404": errors["404"]}}})
    spec.path(path="/v1/jobs/{job_id}/cancel", operations={
        "post": {"summary": "Cancel a job", "operationId": "cancelJob", "parameters": [_JOB_ID],
                 "responses": {"202": _json("JobView", "cancellation recorded"),
                               "404": errors["404"], "409": errors["409"]}}})
    spec.path(path="/v1/spec-checks", operations={
        "post": {"summary": "Validate a job spec without submitting it", "operationId": "checkSpec",
                 "requestBody": {"required": True,
                                 "content": {"application/json": {"schema": "JobSpec"}}},
                 "responses": {"200": {"description": "valid; facts about the model",
                                       "content": {"application/json": {"schema": {"type": "object"}}}},
                               **{k: errors[k] for k in ("400", "413", "415", "422")}}}})
    spec.path(path="/v1/health", operations={
        "get": {"summary": "Redis, workers and queue depths", "operationId": "health",
                "responses": {"200": _json("Health", "healthy"), "503": _json("Health", "degraded")}}})
    _batch_paths(spec, errors)
    return spec.to_dict()


_BATCH_ID = {"name": "batch_id", "in": "path", "required": True,
             "schema": {"type": "string", "pattern": "^[0-9a-f]{28}$"}}


def _batch_paths(spec: APISpec, errors: dict) -> None:
    """/v1/batches: sweeps over a base job (docs/batches.md)."""
    from schemas.batch import BatchSpecSchema

    spec.components.schema("BatchSpec", schema=BatchSpecSchema)
    obj = {"application/json": {"schema": {"type": "object"}}}
    table = {"application/json": {"schema": {"type": "object"}}, "text/csv": {"schema": {"type": "string"}},
             "application/x-npz": {"schema": {"type": "string", "format": "binary"}}}
    spec.path(path="/v1/batches", operations={
        "post": {"summary": "Submit a batch: a base job and its variations", "operationId": "createBatch",
                 "requestBody": {"required": True, "content": {"application/json": {"schema": "BatchSpec"}}},
                 "responses": {"202": {"description": "accepted; poll the Location", "content": obj},
                               **{k: errors[k] for k in ("400", "413", "415", "422", "503")}}},
        "get": {"summary": "List your batches, newest first", "operationId": "listBatches",
                "parameters": [{"name": "limit", "in": "query", "schema": {"type": "integer", "minimum": 1,
                                                                           "maximum": 200}},
                               {"name": "cursor", "in": "query", "schema": {"type": "string"}}],
                "responses": {"200": {"description": "a page of batches", "content": obj}, "400": errors["400"]}}})
    spec.path(path="/v1/batches/{batch_id}", operations={
        "get": {"summary": "Read a batch: state, progress (counts, rate, time left)", "operationId": "getBatch",
                "parameters": [_BATCH_ID],
                "responses": {"200": {"description": "the batch", "content": obj}, "404": errors["404"]}}})
    spec.path(path="/v1/batches/{batch_id}/table", operations={
        "get": {"summary": "The summary table (partial while running)", "operationId": "getBatchTable",
                "parameters": [_BATCH_ID, {"name": "format", "in": "query",
                                           "schema": {"type": "string", "enum": ["json", "csv", "npz"]}}],
                "responses": {"200": {"description": "one row per finished member", "content": table},
                              **{k: errors[k] for k in ("404", "406")}}}})
    spec.path(path="/v1/batches/{batch_id}/statistics", operations={
        "get": {"summary": "Mean, std, min, max and 5/50/95 % quantiles of each summary",
                "operationId": "getBatchStatistics", "parameters": [_BATCH_ID],
                "responses": {"200": {"description": "statistics", "content": obj}, "404": errors["404"]}}})
    spec.path(path="/v1/batches/{batch_id}/spec", operations={
        "get": {"summary": "The batch spec as submitted", "operationId": "getBatchSpec", "parameters": [_BATCH_ID],
                "responses": {"200": {"description": "the spec", "content": {
                    "application/json": {"schema": "BatchSpec"}}}, "404": errors["404"]}}})
    spec.path(path="/v1/batches/{batch_id}/cancel", operations={
        "post": {"summary": "Cancel a batch: waiting chunks never start, running ones stop at the next member",
                 "operationId": "cancelBatch", "parameters": [_BATCH_ID],
                 "responses": {"202": {"description": "cancellation recorded", "content": obj},
                               **{k: errors[k] for k in ("404", "409")}}}})
