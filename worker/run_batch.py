"""Run one chunk of a batch: claim it, solve its members, write one result blob. No Celery here.

The model is prepared once per process (engine.model.prepare caches by content
hash) and each batch's plan (design, summary plan, grid, options) is cached by
batch id, so a chunk costs its members' solves and little else. One member
failing is a row with its outcome and message, never a failed chunk. A cancel
stops the chunk at its next member; the rest of its rows say "cancelled".
"""
from __future__ import annotations

import logging
import threading
import traceback
from collections import OrderedDict
from dataclasses import dataclass
from typing import Callable

import numpy as np

from engine.kernels import native
from sweeps import sampling, summaries
from engine.integrate import CANCELLED, SUCCEEDED, SolverOptions, integrate
from engine.model import PreparedModel, prepare
from jobs import blob as result_blob
from jobs import metrics
from jobs.batch_store import BatchStore
from schemas.batch import BatchSpecSchema
from schemas.job import output_times
from worker.bounds import PreparationLimit, bounded
from worker.options import solver_options
from worker.run_job import Heartbeat

log = logging.getLogger(__name__)
INTERNAL_ERROR = "internal_error"


@dataclass
class BatchPlan:
    """Everything a worker needs to solve any member of one batch."""

    model: PreparedModel
    design: dict
    span: tuple
    grid: np.ndarray
    options: SolverOptions
    terms: list
    n_summaries: int
    traj_index: np.ndarray | None   # positions of the base output times in the grid
    cache: dict                     # sampling's per-design cache (a sample's full matrix)


def make_plan(spec: dict, design: dict) -> BatchPlan:
    """Build the plan of a stored batch spec (validated again: a stored spec is still input)."""
    data = BatchSpecSchema(max_members=10 ** 9, max_trajectory_values=10 ** 12).load(spec)
    base = data["base"]
    with bounded(base["limits"]["max_wall_seconds"]):
        model, machine_code = native.choose(prepare(base["model"]), base["machine_code"],
                                            solves=sampling.design_size(design))
    log.info("batch model %s: machine code %s", model.content_hash[:12], machine_code)
    sums = data["summaries"]
    extra = [s["time"] for s in sums if s["kind"] == "at"]
    out_times = output_times(base["span"], base["output"]) if data["trajectories"] else np.zeros(0)
    grid = summaries.grid(base["span"], data["summary_grid"]["count"], data["summary_grid"]["spacing"],
                          [*extra, *out_times.tolist()])
    options = solver_options(base, model, diagnostics="counts")
    p0, y0 = model.with_overrides(base["parameters"], base["initial"])
    model = _with_base(model, p0, y0)
    return BatchPlan(model=model, design=design, span=tuple(base["span"]), grid=grid, options=options,
                     terms=summaries.plan(sums, model.state_names, model.aux_names, model.event_names),
                     n_summaries=len(summaries.columns(sums)),
                     traj_index=np.searchsorted(grid, out_times) if data["trajectories"] else None,
                     cache={})


def _with_base(model: PreparedModel, p0, y0) -> PreparedModel:
    from dataclasses import replace

    return replace(model, p=p0, y0=y0)


@dataclass
class ChunkResult:
    summaries: np.ndarray          # (m, n_summaries), NaN where undefined or the member failed
    outcomes: list                 # outcome name per member
    messages: dict                 # {member index: message} for members that did not succeed
    trajectories: np.ndarray | None

    def counts(self) -> tuple[int, int, int]:
        ok = sum(o == SUCCEEDED for o in self.outcomes)
        cancelled = sum(o == CANCELLED for o in self.outcomes)
        return ok, len(self.outcomes) - ok - cancelled, cancelled


def solve_members(plan: BatchPlan, start: int, stop: int,
                  should_stop: Callable[[], bool] = lambda: False) -> ChunkResult:
    """Solve members start..stop-1; stops at the next member once ``should_stop()`` is true."""
    m = plan.model
    values = sampling.member_values(plan.design, start, stop, plan.cache)
    P, Y = sampling.apply_values(values, plan.design["columns"], m.p, m.y0, m.param_names, m.state_names)
    count = stop - start
    table = np.full((count, plan.n_summaries), np.nan)
    traj = None if plan.traj_index is None else np.full((count, len(plan.traj_index), m.kernel.n), np.nan)
    outcomes, messages = [], {}
    monitor = lambda _fraction: should_stop()  # noqa: E731 (a long member also stops on cancel)
    for j in range(count):
        if should_stop():
            outcomes.extend([CANCELLED] * (count - j))
            messages.update({start + k: "cancelled before it started" for k in range(j, count)})
            break
        try:
            sol = integrate(m.kernel, P[j], Y[j], plan.span, plan.grid, plan.options, monitor=monitor)
        except Exception as e:  # a member's error is data; keep the worker and the chunk alive
            log.warning("member %d crashed in the engine:\n%s", start + j, traceback.format_exc())
            outcomes.append(INTERNAL_ERROR)
            messages[start + j] = f"internal error while solving ({type(e).__name__}: {e})"
            continue
        outcomes.append(sol.outcome)
        if sol.outcome == SUCCEEDED:
            table[j] = summaries.evaluate(plan.terms, sol.t, sol.y, sol.aux, sol.event_t, sol.event_index)
        else:
            messages[start + j] = sol.message
        if traj is not None:
            k = min(len(sol.t), len(plan.grid))
            reached = plan.traj_index < k
            traj[j, reached] = sol.y[plan.traj_index[reached]]
    return ChunkResult(table, outcomes, messages, traj)


def encode_chunk(start: int, result: ChunkResult) -> bytes:
    arrays = {"summaries": result.summaries}
    if result.trajectories is not None:
        arrays["trajectories"] = result.trajectories
    meta = {"start": start, "outcomes": result.outcomes,
            "messages": {str(k): v for k, v in result.messages.items()}}
    return result_blob.encode(meta, arrays)


class _ChunkBeat:
    """Adapts Heartbeat (written for jobs) to a chunk's lease."""

    def __init__(self, store: BatchStore, batch_id: str, chunk: int):
        self.store, self.batch_id, self.chunk = store, batch_id, chunk
        self.settings = store.settings

    def heartbeat(self, _job_id, attempt, _progress):
        return self.store.heartbeat_chunk(self.batch_id, self.chunk, attempt)


_PLANS: OrderedDict = OrderedDict()
_PLANS_LOCK = threading.Lock()


def plan_for(store: BatchStore, batch_id: str) -> BatchPlan:
    with _PLANS_LOCK:
        plan = _PLANS.get(batch_id)
        if plan is not None:
            _PLANS.move_to_end(batch_id)
            return plan
    plan = make_plan(store.spec(batch_id), store.design(batch_id))
    with _PLANS_LOCK:
        _PLANS[batch_id] = plan
        while len(_PLANS) > 8:
            _PLANS.popitem(last=False)
    return plan


def run_chunk(store: BatchStore, publish: Callable[[str, int], None], batch_id: str, chunk: int) -> str:
    """Claim and run one chunk; then publish the batch's next chunks. Returns what happened."""
    status, attempt = store.claim_chunk(batch_id, chunk)
    if status != "claimed":
        log.info("batch %s chunk %d not claimed: %s", batch_id, chunk, status)
        _publish_next(store, publish, batch_id)
        return status
    rec = store.get(batch_id)
    start = chunk * rec.chunk_size
    stop = min(start + rec.chunk_size, rec.total)
    with Heartbeat(_ChunkBeat(store, batch_id, chunk), f"{batch_id}:{chunk}", attempt) as beat:
        try:
            plan = plan_for(store, batch_id)
            result = solve_members(plan, start, stop, lambda: beat.cancel or beat.fenced)
        except PreparationLimit as e:  # the model cannot be prepared within its bounds
            result = ChunkResult(np.full((stop - start, 0), np.nan), [e.outcome] * (stop - start),
                                 {i: e.message for i in range(start, stop)}, None)
        except Exception as e:  # the whole plan is unusable (e.g. the stored spec no longer loads)
            log.error("batch %s chunk %d failed:\n%s", batch_id, chunk, traceback.format_exc())
            msg = f"internal error while preparing the batch ({type(e).__name__}: {e})"
            result = ChunkResult(np.full((stop - start, 0), np.nan), [INTERNAL_ERROR] * (stop - start),
                                 {i: msg for i in range(start, stop)}, None)
        if beat.fenced:
            log.warning("batch %s chunk %d attempt %d was fenced out; result dropped", batch_id, chunk, attempt)
            return "fenced"
        blob = encode_chunk(start, result)
        written = beat.write(f"finish of batch {batch_id} chunk {chunk}",
                             lambda: store.finish_chunk(batch_id, chunk, attempt, result.counts(), blob))
    if written is None:
        return "lease_lost"
    if written:  # operations metrics (jobs/metrics.py)
        metrics.chunk_finished(store.r, store.keys, result.outcomes)
    _publish_next(store, publish, batch_id)
    return {0: "fenced", 1: "done", 2: "settled"}[written]


def _publish_next(store: BatchStore, publish, batch_id: str) -> None:
    for nxt in store.next_chunks(batch_id):
        publish(batch_id, nxt)


def reconcile_batches(store: BatchStore, publish: Callable[[str, int], None]) -> None:
    """Republish chunks whose worker (or message) was lost; top up each batch's window of chunks.

    A tick of the worker's housekeeping thread (worker/reconciler.py); leases are not acted
    on for one lease period after Redis restarted (``reconciler.redis_settled``).
    """
    from worker.reconciler import redis_settled

    settled = redis_settled(store)
    for batch_id in store.active_ids():
        for chunk in store.requeue_expired(batch_id) if settled else ():
            log.warning("batch %s chunk %d lost its worker or its message; published again", batch_id, chunk)
            publish(batch_id, chunk)
        _publish_next(store, publish, batch_id)
