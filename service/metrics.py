"""/metrics: the Prometheus text exposition format, read from Redis at scrape time.

Every gunicorn process answers alike: a custom collector (:class:`StoreCollector`) reads the
live gauges and the counters and histograms that workers record (jobs/metrics.py) in one
pipelined round trip, so no per-process state and no multiprocess directory are needed.

Access (``STIFFLANE_METRICS_ACCESS``): ``admin`` (default) wants an admin key in
``Authorization: Bearer`` (401 without one, 403 for a user key; with STIFFLANE_AUTH_MODE=off
every request is the local admin); ``public`` needs no key, for a scraper on a private network;
``off`` answers 404. The endpoint is not counted in the keys' rate windows.
"""
from __future__ import annotations

import time

from flask import Blueprint, Response, current_app, request
from prometheus_client import generate_latest
from prometheus_client.core import CollectorRegistry, CounterMetricFamily, GaugeMetricFamily, HistogramMetricFamily
from prometheus_client.registry import Collector
from redis.exceptions import RedisError

from jobs import accounts
from jobs import metrics as store_metrics
from service.problems import ApiProblem

bp = Blueprint("metrics", __name__)
CONTENT_TYPE = "text/plain; version=0.0.4; charset=utf-8"  # the Prometheus text exposition format
ACCESS = ("admin", "public", "off")
HELP = {
    "job_solve_seconds": "Wall time of a finished job from its first start to its finish (prepare and solve)",
    "job_wait_seconds": "Time a finished job waited from submission to its first start",
}


class StoreCollector(Collector):
    """Reads the truth from Redis at each scrape."""

    def __init__(self, store, settings):
        self.store, self.settings = store, settings

    def collect(self):
        started = time.perf_counter()
        up = GaugeMetricFamily("stifflane_store_up", "1 when the job store (Redis) answered this scrape")
        try:
            snap = store_metrics.snapshot(self.store.r, self.store.keys,
                                          [self.settings.interactive_queue, self.settings.batch_queue])
        except RedisError:
            up.add_metric([], 0)
            yield up
            return
        up.add_metric([], 1)
        yield up
        jobs = GaugeMetricFamily("stifflane_jobs", "Jobs kept in the store by state (terminal ones until "
                                 "their result TTL; expired ones may count until pruned)", labels=["state"])
        for state, n in snap.jobs_by_state.items():
            jobs.add_metric([state], n)
        yield jobs
        queue = GaugeMetricFamily("stifflane_queue_messages", "Messages waiting in the broker queue",
                                  labels=["queue"])
        for name, n in snap.queues.items():
            queue.add_metric([name], n)
        yield queue
        yield GaugeMetricFamily("stifflane_oldest_queued_job_age_seconds",
                                "Age of the oldest queued job (0 when none waits)", value=snap.oldest_queued_seconds)
        yield GaugeMetricFamily("stifflane_batches_active", "Batches not yet settled", value=snap.batches_active)
        finished = CounterMetricFamily("stifflane_jobs_finished", "Jobs finished by workers, by terminal state "
                                       "and outcome", labels=["state", "outcome"])
        for (state, outcome), n in sorted(snap.jobs_finished.items()):
            finished.add_metric([state, outcome], n)
        yield finished
        members = CounterMetricFamily("stifflane_batch_members_finished", "Batch members finished, by outcome "
                                      "(rate() of it is members per second)", labels=["outcome"])
        for outcome, n in sorted(snap.members_finished.items()):
            members.add_metric([outcome], n)
        yield members
        yield CounterMetricFamily("stifflane_batch_chunks_finished", "Batch chunks finished by workers",
                                  value=snap.chunks_finished)
        for name, h in snap.histograms.items():
            yield HistogramMetricFamily(f"stifflane_{name}", HELP[name], buckets=h.cumulative(), sum_value=h.sum)
        yield GaugeMetricFamily("stifflane_scrape_duration_seconds", "Time this API process took to read the "
                                "figures from the store", value=time.perf_counter() - started)


def _registry():
    ext = current_app.extensions
    if "stifflane.metrics" not in ext:
        ctx = ext["stifflane"]
        registry = CollectorRegistry(auto_describe=False)
        registry.register(StoreCollector(ctx.store, ctx.settings))
        ext["stifflane.metrics"] = registry
    return ext["stifflane.metrics"]


def _authorize(settings, store) -> None:
    from service.auth import CHALLENGE

    if settings.metrics_access == "public" or settings.auth_mode == "off":
        return
    scheme, _, key = request.headers.get("Authorization", "").partition(" ")
    principal = accounts.authenticate(store.r, store.keys, key.strip()) if scheme.lower() == "bearer" else None
    if principal is None:
        raise ApiProblem(401, "Unauthorized", "send an admin API key as 'Authorization: Bearer <key>' "
                         "(or set STIFFLANE_METRICS_ACCESS=public on a private network)",
                         headers={"WWW-Authenticate": CHALLENGE}, kind="unauthorized")
    if not principal.is_admin:
        raise ApiProblem(403, "Forbidden", "metrics need a key with the admin role", kind="forbidden")


@bp.get("/metrics")
def metrics():
    """Operations metrics in the Prometheus text format.
    ---
    get:
      summary: Operations metrics (Prometheus text format)
      operationId: metrics
      description: Jobs by state, queue lengths, solve and wait time histograms, jobs finished by outcome,
        batch members finished. Needs an admin key unless the server runs with STIFFLANE_METRICS_ACCESS=public.
      responses:
        200:
          description: the metrics
          content: {text/plain: {schema: {type: string}}}
        403: Forbidden
    """
    ctx = current_app.extensions["stifflane"]
    if ctx.settings.metrics_access not in ACCESS or ctx.settings.metrics_access == "off":
        raise ApiProblem(404, "Not Found", "metrics are switched off (STIFFLANE_METRICS_ACCESS=off)")
    _authorize(ctx.settings, ctx.store)
    return Response(generate_latest(_registry()), content_type=CONTENT_TYPE, headers={"Cache-Control": "no-store"})


def _document(app, doc: dict) -> None:
    """The operation as this server runs it: public, or absent when switched off."""
    access = app.extensions["stifflane"].settings.metrics_access
    if access == "off":
        doc["paths"].pop("/metrics", None)
    elif access == "public" or app.extensions["stifflane"].settings.auth_mode == "off":
        op = doc["paths"]["/metrics"]["get"]
        op["security"] = []
        op["responses"].pop("403", None)


metrics.openapi_adjust = _document
