"""Response shapes: job views, pages of jobs, health."""
from __future__ import annotations

from marshmallow import Schema, fields

STATE_DESCRIPTION = "queued, running, succeeded, failed or cancelled"


class JobLinksSchema(Schema):
    self = fields.String()
    result = fields.String()
    cancel = fields.String()


class JobViewSchema(Schema):
    id = fields.String()
    state = fields.String(metadata={"description": STATE_DESCRIPTION})
    progress = fields.Float(metadata={"description": "fraction of the time span integrated, 0..1"})
    label = fields.String(attribute="title")
    owner = fields.String(metadata={"description": "owner of the API key that created the job"})
    method = fields.String()
    created_at = fields.String(metadata={"description": "RFC 3339 UTC"})
    started_at = fields.String(allow_none=True)
    finished_at = fields.String(allow_none=True)
    attempt = fields.Integer()
    cancel_requested = fields.Boolean()
    outcome = fields.String(allow_none=True, metadata={"description": "how the run ended (named outcome)"})
    message = fields.String(allow_none=True)
    digest = fields.Dict(allow_none=True, metadata={"description": "short diagnostics summary when done"})
    links = fields.Nested(JobLinksSchema)


class JobPageSchema(Schema):
    items = fields.List(fields.Nested(JobViewSchema))
    next_cursor = fields.String(allow_none=True)


class CreatedSchema(Schema):
    id = fields.String()
    state = fields.String()
    links = fields.Nested(JobLinksSchema)


CAUTION = ("Numerical results are approximations. Before any engineering, safety or clinical "
           "decision (reactor design, relief sizing, dosing), have them checked by a qualified "
           "person against local codes and licensed practice.")
CAUTION_CSV_LINE = "# caution: " + CAUTION  # first line of every CSV export


class ResultSchema(Schema):
    id = fields.String()
    state = fields.String(metadata={
        "description": "the job's state when the result was read: succeeded, failed, cancelled, or running "
                       "(a live snapshot of the run so far)"})
    partial = fields.Boolean(metadata={
        "description": "false only for a succeeded run's whole result; true for a failed, cancelled or "
                       "time-limited run (states up to the last output time reached) and for a running job"})
    t_reached = fields.Float(allow_none=True, metadata={
        "description": "the time the integration reached (the span's end for a succeeded run)"})
    t_end = fields.Float(allow_none=True, metadata={"description": "the end of the job's span"})
    outcome = fields.String(allow_none=True, metadata={
        "description": "how the run ended (named outcome); null while it runs"})
    message = fields.String()
    times = fields.List(fields.Float())
    states = fields.Dict(keys=fields.String(), values=fields.List(fields.Float()))
    derived = fields.Dict(keys=fields.String(), values=fields.List(fields.Float()))
    events = fields.List(fields.Dict(), metadata={
        "description": "event crossings located during the run: name, t, states there"})
    report = fields.Dict(metadata={"description": "full solver diagnostics (stiffness report)"})
    model = fields.Dict(metadata={"description": "prepared-model facts: names, stoichiometry, conservation laws"})
    units = fields.Dict(keys=fields.String(), values=fields.String(), metadata={
        "description": "the model's unit labels: state or parameter name -> unit (names without one are absent)"})
    sensitivity = fields.Dict(metadata={
        "description": "present when the spec asked for sensitivities: wrt (labels: parameter names and "
                       "init:<state>), values (θ), error_control, raw {state: {label: [dy/dθ at each time]}}, "
                       "normalised {state: {label: [d ln y / d ln θ]}} (null where y or θ is 0); with "
                       "sensitivity.rank in the spec, ranking: [{output, label, value, t, entries: [{wrt, "
                       "reactions, normalised, raw}] by |normalised| descending, note?}]"})
    caution = fields.String()


class HealthSchema(Schema):
    status = fields.String(metadata={"description": "ok or degraded"})
    redis = fields.Dict()
    worker_count = fields.Integer(metadata={"description": "workers that reported in the last 30 s"})
    workers = fields.List(fields.Dict(), metadata={
        "description": "each worker's name, host and process (only for a request with a valid key)"})
    queues = fields.Dict(keys=fields.String(), values=fields.Integer())
    detail = fields.String()


class SpecCheckSchema(Schema):
    """The answer of /v1/spec-checks for a valid spec."""

    valid = fields.Boolean(required=True)
    model = fields.Dict(required=True, metadata={
        "description": "facts about the prepared model: names, counts, stoichiometry, conservation laws"})


# ---- batches (docs/batches.md). Shapes of the replies only; nothing loads with these.

class BatchLinksSchema(Schema):
    self = fields.String()
    table = fields.String()
    statistics = fields.String()
    spec = fields.String()
    cancel = fields.String()


class BatchProgressSchema(Schema):
    total = fields.Integer(required=True)
    succeeded = fields.Integer(required=True)
    failed = fields.Integer(required=True)
    cancelled = fields.Integer(required=True)
    lost = fields.Integer(required=True)
    remaining = fields.Integer(required=True)
    fraction = fields.Float(required=True, metadata={"description": "finished members / total, 0..1"})
    members_per_second = fields.Float(allow_none=True, required=True)
    eta_seconds = fields.Float(allow_none=True, required=True)


class BatchViewSchema(Schema):
    id = fields.String(required=True)
    state = fields.String(required=True, metadata={"description": STATE_DESCRIPTION})
    label = fields.String(metadata={"description": "the batch's label (or its base job's, or the "
                                                   "model's title)"})
    created_at = fields.String(allow_none=True, metadata={"description": "RFC 3339 UTC"})
    started_at = fields.String(allow_none=True)
    finished_at = fields.String(allow_none=True)
    cancel_requested = fields.Boolean()
    chunk_size = fields.Integer()
    chunks = fields.Integer()
    progress = fields.Nested(BatchProgressSchema, required=True)
    columns = fields.Dict(metadata={"description": "column names: values (the varied inputs), summaries"})
    links = fields.Nested(BatchLinksSchema)


class BatchPageSchema(Schema):
    items = fields.List(fields.Nested(BatchViewSchema), required=True)
    next_cursor = fields.String(allow_none=True, required=True)


class BatchCreatedSchema(Schema):
    id = fields.String(required=True)
    state = fields.String(required=True)
    members = fields.Integer(required=True)
    links = fields.Nested(BatchLinksSchema)


class BatchTableSchema(Schema):
    id = fields.String(required=True)
    state = fields.String(required=True)
    complete = fields.Boolean(required=True, metadata={"description": "false while members still run"})
    rows = fields.Integer(required=True)
    total = fields.Integer(required=True)
    columns = fields.Dict(required=True, metadata={
        "description": "columnar: index, values {name: [...]}, summaries {name: [...]} (null where "
                       "undefined or the member failed), outcome, message"})
    caution = fields.String()


class BatchStatisticsSchema(Schema):
    id = fields.String(required=True)
    state = fields.String(required=True)
    complete = fields.Boolean(required=True)
    rows = fields.Integer(required=True)
    outcomes = fields.Dict(keys=fields.String(), values=fields.Integer(), required=True)
    summaries = fields.Dict(keys=fields.String(), values=fields.Dict(), required=True, metadata={
        "description": "per summary: count, mean, std, min, max, q05, q50, q95 (null without data)"})
