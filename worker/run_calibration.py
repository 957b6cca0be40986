"""Run one unit of a calibration: a chunk of starts, or the summary. No Celery here.

A chunk claims its unit, runs ``calibration.fit.run_start`` for each of its starts (the
starting points are ``calibration.fit.starts(problem, total, seed)``, the same in every
process) and writes their ``StartOutcome.to_json()`` in one fenced finish, with the counts
and the best sum of squares it reached. A start that raises anyway is a failed outcome
with its message, never a failed chunk; a cancel stops the chunk at its next start. When
every start is in, the summary unit reads all outcomes, runs ``calibration.fit.summarise``
and writes the estimate (or the reason there is none), which settles the calibration.

The problem (spec loaded again, model prepared by the numerics) is cached per process by
calibration id, so a chunk costs its starts and little else.
"""
from __future__ import annotations

import json
import logging
import math
import threading
import time
import traceback
from collections import OrderedDict
from dataclasses import dataclass, fields, replace
from typing import Callable

import numpy as np

from jobs.blob import json_safe
from jobs.blob import pack_json as pack
from jobs.calibration_store import CalibrationStore
from schemas.calibration import CalibrationSpecSchema, Limits, problem_of
from worker.run_job import Heartbeat

log = logging.getLogger(__name__)
UNLIMITED = Limits(rows=10 ** 9, experiments=10 ** 9, unknowns=10 ** 9, starts=10 ** 9)


@dataclass
class Plan:
    problem: object
    x0: np.ndarray   # (starts, unknowns), natural units


def make_plan(spec: dict, total: int, seed: int) -> Plan:
    """The problem of a stored spec (validated again: a stored spec is still input) and its starts."""
    from calibration import fit

    data = CalibrationSpecSchema(limits=UNLIMITED).load(spec)
    problem = problem_of(data).problem
    if "machine_code" in {f.name for f in fields(problem)}:  # the numerics may take the job's choice
        problem = replace(problem, machine_code=data["machine_code"])
    return Plan(problem, np.asarray(fit.starts(problem, total, seed), dtype=float))


_PLANS: OrderedDict = OrderedDict()
_PLANS_LOCK = threading.Lock()


def plan_for(store: CalibrationStore, cal_id: str, total: int, seed: int) -> Plan:
    with _PLANS_LOCK:
        plan = _PLANS.get(cal_id)
        if plan is not None:
            _PLANS.move_to_end(cal_id)
            return plan
    plan = make_plan(store.spec(cal_id), total, seed)
    with _PLANS_LOCK:
        _PLANS[cal_id] = plan
        while len(_PLANS) > 8:
            _PLANS.popitem(last=False)
    return plan


def _failed_outcome(index: int, x0, message: str) -> dict:
    return {"index": int(index), "x0": [float(v) for v in x0], "x": [float(v) for v in x0],
            "sum_of_squares": None, "status": "failed", "message": message, "evaluations": 0,
            "failed_solves": 0, "seconds": 0.0}


@dataclass
class ChunkOutcomes:
    outcomes: list      # StartOutcome.to_json() of each start run
    cancelled: list     # start indexes not run because of a cancel

    def counts(self) -> tuple[int, int, int]:
        failed = sum(o.get("status") == "failed" for o in self.outcomes)
        return len(self.outcomes) - failed, failed, len(self.cancelled)

    def failed_solves(self) -> int:
        return sum(int(o.get("failed_solves") or 0) for o in self.outcomes)

    def best(self) -> tuple[float, int] | None:
        finite = [(o["sum_of_squares"], o["index"]) for o in self.outcomes
                  if o.get("status") != "failed" and isinstance(o.get("sum_of_squares"), (int, float))
                  and math.isfinite(o["sum_of_squares"])]
        return min(finite) if finite else None


def run_starts(plan: Plan, start: int, stop: int, should_stop: Callable[[], bool] = lambda: False) -> ChunkOutcomes:
    """Starts start..stop-1, one ``run_start`` each; stops at the next start once ``should_stop()``."""
    from calibration import fit

    result = ChunkOutcomes([], [])
    for index in range(start, stop):
        if should_stop():
            result.cancelled.extend(range(index, stop))
            break
        x0 = plan.x0[index]
        try:
            outcome = json_safe(fit.run_start(plan.problem, index, x0).to_json())
        except Exception as e:  # a start's error is data; keep the worker and the chunk alive
            log.warning("start %d crashed:\n%s", index, traceback.format_exc())
            outcome = _failed_outcome(index, x0, f"internal error in this start ({type(e).__name__}: {e})")
        result.outcomes.append(outcome)
    return result


class _UnitBeat:
    """Adapts Heartbeat (written for jobs) to a calibration unit's lease."""

    def __init__(self, store: CalibrationStore, cal_id: str, unit: int):
        self.store, self.cal_id, self.unit = store, cal_id, unit
        self.settings = store.settings

    def heartbeat(self, _job_id, attempt, _progress):
        return self.store.heartbeat_chunk(self.cal_id, self.unit, attempt)


def run_unit(store: CalibrationStore, publish: Callable[[str, int], None], cal_id: str, unit: int) -> str:
    """Claim and run one unit (a chunk of starts, or the summary); then publish what is due next."""
    status, attempt = store.claim_chunk(cal_id, unit)
    if status != "claimed":
        log.info("calibration %s unit %d not claimed: %s", cal_id, unit, status)
        _publish_next(store, publish, cal_id)
        return status
    rec = store.get(cal_id)
    with Heartbeat(_UnitBeat(store, cal_id, unit), f"{cal_id}:{unit}", attempt) as beat:
        if unit == rec.n_chunks:
            outcome = _summary(store, beat, rec, attempt)
        else:
            outcome = _chunk(store, beat, rec, unit, attempt)
    if outcome in ("done", "written"):
        _publish_next(store, publish, cal_id)
    return outcome


def _chunk(store: CalibrationStore, beat: Heartbeat, rec, unit: int, attempt: int) -> str:
    cal_id = rec.id
    start = unit * rec.chunk_size
    stop = min(start + rec.chunk_size, rec.total)
    try:
        plan = plan_for(store, cal_id, rec.total, rec.seed)
        result = run_starts(plan, start, stop, lambda: beat.cancel or beat.fenced)
    except Exception as e:  # the whole problem is unusable (a stored spec that no longer loads...)
        log.error("calibration %s chunk %d failed:\n%s", cal_id, unit, traceback.format_exc())
        msg = f"internal error while preparing the calibration ({type(e).__name__}: {e})"
        result = ChunkOutcomes([_failed_outcome(i, [], msg) for i in range(start, stop)], [])
    if beat.fenced:
        log.warning("calibration %s chunk %d attempt %d was fenced out; outcomes dropped", cal_id, unit, attempt)
        return "fenced"
    blob = pack({"start": start, "outcomes": result.outcomes, "cancelled": result.cancelled})
    written = beat.write(f"finish of calibration {cal_id} chunk {unit}", lambda: store.finish_chunk(
        cal_id, unit, attempt, result.counts(), result.failed_solves(), result.best(), blob))
    if written is None:
        return "lease_lost"
    return {0: "fenced", 1: "done", 2: "done"}[written]


def _summary(store: CalibrationStore, beat: Heartbeat, rec, attempt: int) -> str:
    """Every start is in: the estimate from their outcomes, or why there is none."""
    cal_id = rec.id
    began = time.perf_counter()
    state, message, estimate = "succeeded", "", None
    try:
        from calibration import fit

        raw = store.start_outcomes(cal_id, rec.n_chunks)
        outcomes = [fit.StartOutcome.from_json(o) for o in raw]
        usable = [o for o in raw if o.get("status") != "failed" and o.get("sum_of_squares") is not None]
        if not raw:
            state, message = "failed", "no start finished (every chunk was lost); submit the calibration again"
        elif not usable:
            state = "failed"
            first = next((o.get("message") for o in raw if o.get("message")), "")
            message = (f"every one of the {len(raw)} starts failed; the first said: {first[:300]}"
                       if first else f"every one of the {len(raw)} starts failed")
        else:
            plan = plan_for(store, cal_id, rec.total, rec.seed)
            estimate = json_safe(fit.summarise(plan.problem, outcomes).to_json())
            json.dumps(estimate, allow_nan=False)  # JSON-safe, or the estimate is refused here
    except Exception as e:
        log.error("calibration %s summary failed:\n%s", cal_id, traceback.format_exc())
        state, message, estimate = "failed", f"the estimate could not be computed ({type(e).__name__}: {e})", None
    if beat.fenced:
        return "fenced"
    written = beat.write(f"summary of calibration {cal_id}",
                         lambda: store.finish_summary(cal_id, attempt, state, message, estimate))
    log.info("calibration %s summarised in %.2f s: %s", cal_id, time.perf_counter() - began, state)
    if written is None:
        return "lease_lost"
    return "written" if written else "fenced"


def _publish_next(store: CalibrationStore, publish, cal_id: str) -> None:
    for nxt in store.next_chunks(cal_id):
        publish(cal_id, nxt)


def reconcile_calibrations(store: CalibrationStore, publish: Callable[[str, int], None]) -> None:
    """Republish units whose worker (or message) was lost; top up each calibration's window.

    A tick of the worker's housekeeping thread (worker/reconciler.py); leases are not acted
    on for one lease period after Redis restarted (``reconciler.redis_settled``).
    """
    from worker.reconciler import redis_settled

    settled = redis_settled(store)
    for cal_id in store.active_ids():
        for unit in store.requeue_expired(cal_id) if settled else ():
            log.warning("calibration %s unit %d lost its worker or its message; published again", cal_id, unit)
            publish(cal_id, unit)
        _publish_next(store, publish, cal_id)
