"""Run one job: claim it, solve it, write its terminal state. No Celery here.

Every failure becomes a terminal state with a message; nothing a user sends can
crash the worker. A heartbeat thread keeps the lease alive (also while numba
loads kernels) and carries the cancel flag to the integrator's monitor.
"""
from __future__ import annotations

import dataclasses
import logging
import threading
import time
import traceback

from marshmallow import ValidationError

from calibration import ranking
from engine.kernels import native
from engine.integrate import CANCELLED, SUCCEEDED, Reached, integrate
from engine.model import ModelError, prepare
from engine.sensitivities import prepare_sensitivities, split
from jobs import blob as result_blob
from jobs import metrics
from jobs.store import JobStore
from schemas.job import JobSpecSchema, output_times
from worker.bounds import PreparationLimit, bounded
from worker.options import solver_options

log = logging.getLogger(__name__)

DIGEST_KEYS = ("accepted_steps", "rejected_steps", "rhs_evaluations", "jacobian_evaluations",
               "lu_factorizations", "newton_iterations", "solve_seconds", "prepare_seconds",
               "methods_used", "switch_count", "machine_code")


class Heartbeat:
    """Background lease renewal for one running attempt.

    ``lease_until`` is this process's estimate (monotonic clock) of when the lease runs out:
    one lease after the last heartbeat Redis accepted (after the claim, at first).
    """

    def __init__(self, store: JobStore, job_id: str, attempt: int, period: float = 1.0):
        self.store, self.job_id, self.attempt, self.period = store, job_id, attempt, period
        self.progress: float | None = 0.0
        self.live: LiveResult | None = None  # set once the model is prepared
        self.cancel = False
        self.fenced = False
        self.lease_seconds = float(store.settings.lease_seconds)
        self.lease_until = time.monotonic() + self.lease_seconds
        self._done = threading.Event()
        self._thread = threading.Thread(target=self._run, name=f"heartbeat-{job_id}", daemon=True)

    def __enter__(self):
        self._thread.start()
        return self

    def __exit__(self, *exc):
        self._done.set()
        self._thread.join(timeout=5)

    def _run(self):
        while not self._done.wait(self.period):
            sent = time.monotonic()
            try:
                flag = self.store.heartbeat(self.job_id, self.attempt, self.progress)
            except Exception as e:  # Redis blip: keep solving, the lease has slack
                log.warning("heartbeat failed for %s: %s", self.job_id, e)
                continue
            if flag >= 0:
                self.lease_until = sent + self.lease_seconds
            self.fenced = flag < 0
            self.cancel = flag == 1
            live = self.live
            if live is not None and not self.fenced and not self._done.is_set():
                live.flush(self.store, self.job_id, self.attempt)

    def write(self, what: str, write, first_delay: float = 0.05, max_delay: float = 1.0):
        """``write()`` (a fenced finish), retried with backoff while Redis is unreachable and
        the lease still holds; the heartbeat keeps beating meanwhile, so the lease is renewed
        as soon as Redis answers again. Returns what ``write`` returns, or None when the lease
        ran out first (the reconciler then requeues the job and another attempt runs it)."""
        from redis.exceptions import ConnectionError as RedisConnectionError
        from redis.exceptions import TimeoutError as RedisTimeoutError

        delay = first_delay
        while True:
            try:
                return write()
            except (RedisConnectionError, RedisTimeoutError) as e:
                left = self.lease_until - time.monotonic()
                if left <= 0:
                    log.error("%s failed and the lease ran out (%s); the job will run again", what, e)
                    return None
                log.warning("%s failed (%s); retrying while the lease holds (%.1f s left)", what, e, left)
                time.sleep(min(delay, left))
                delay = min(2 * delay, max_delay)

    def monitor(self, fraction: float) -> bool:
        """The integrator's progress callback: True means stop now."""
        self.progress = min(max(float(fraction), 0.0), 1.0)
        return self.cancel or self.fenced


LIVE_ROWS = 2000          # rows of a live snapshot at most (thinned evenly, last row kept)
LIVE_VALUES = 400_000     # numbers per snapshot at most: fewer rows for wide models
LIVE_PERIOD = 2.0         # seconds between snapshots at least


class LiveResult:
    """The partial result of a running job, for GET .../result while it runs.

    The integrator hands a view of what it has reached (``__call__``, in the solving thread,
    at most every 0.5 s); at most every ``LIVE_PERIOD`` s this copies a bounded snapshot
    (the output rows reached, thinned to ``LIVE_ROWS``; events; step history), and the
    heartbeat thread encodes and writes it (``flush``), fenced by the attempt. A slow write
    stretches the period (ten times the last write's duration), so a wide model never
    spends more than a tenth of the time on snapshots.
    """

    def __init__(self, header: dict, span: tuple[float, float], n_columns: int, n_states: int | None = None):
        self.header = header
        self.n_states = n_states  # the states' columns of an augmented (sensitivity) system  # names, units, model facts: the parts of the meta that never change
        self.span = span
        self.rows = max(10, min(LIVE_ROWS, LIVE_VALUES // max(n_columns, 1)))
        self.period = LIVE_PERIOD
        self.next_at = 0.0      # the first view is kept at once (0.5 s into the solve)
        self.pending = None
        self.written = 0

    def __call__(self, reached: Reached) -> None:
        now = time.monotonic()
        if now < self.next_at or self.pending is not None:
            return
        self.next_at = now + self.period
        try:
            t, y, aux = reached.outputs(self.rows)
            if self.n_states is not None:
                y = y[:, :self.n_states]
            ev_t, ev_i, ev_y = reached.events()
            report = {"method": reached.method, "accepted_steps": reached.accepted_steps,
                      "t_reached": reached.t}
            history = reached.step_history()
            if history is not None:
                report["step_history"] = history
            self.pending = (reached.t, report, (ev_t, ev_i, ev_y), {"t": t, "y": y, "aux": aux})
        except Exception:  # a snapshot is a courtesy: never let it stop the solve
            log.exception("live result snapshot failed")

    def flush(self, store: JobStore, job_id: str, attempt: int) -> None:
        """Write the pending snapshot, if any (heartbeat thread)."""
        pending, self.pending = self.pending, None
        if pending is None:
            return
        t_reached, report, (ev_t, ev_i, ev_y), arrays = pending
        h = self.header
        started = time.perf_counter()
        try:
            events = [{"name": h["event_names"][int(i)], "t": float(t),
                       "states": dict(zip(h["state_names"], y))} for i, t, y in zip(ev_i, ev_t, ev_y)]
            meta = {"outcome": None, "partial": True, "t_reached": t_reached, "t_end": self.span[1],
                    "attempt": attempt, "report": report, "events": events,
                    "message": f"running: integrated to t = {t_reached:.6g} of {self.span[1]:.6g} so far",
                    **{k: v for k, v in h.items() if k != "event_names"}}
            if store.write_live(job_id, attempt, result_blob.encode(meta, arrays)):
                self.written += 1
        except Exception as e:  # Redis blip: the next snapshot will do
            log.warning("live result of %s not written: %s", job_id, e)
        self.period = max(LIVE_PERIOD, 10 * (time.perf_counter() - started))


def progress_reached(t_reached: float, span) -> float:
    """The fraction of the span a run reached, 0..1."""
    t0, t1 = float(span[0]), float(span[1])
    if not (t1 > t0):
        return 0.0
    return min(max((t_reached - t0) / (t1 - t0), 0.0), 1.0)


def digest(report: dict, prepare_seconds: float) -> dict:
    out = {k: report[k] for k in DIGEST_KEYS if k in report}
    out["prepare_seconds"] = round(prepare_seconds, 6)
    return out


def _ranking(job_id: str, spec: dict, sm, theta, p, t, y, raw) -> list[dict]:
    """The ranking of the sensitivity parameters by the outputs the spec names; an output that
    cannot be ranked carries a note, and an unexpected error notes every output (the job's
    result stands)."""
    outputs = spec["sensitivity"]["rank"]
    try:
        return result_blob.json_safe(ranking.rank(spec["model"], sm.base.state_names, sm.wrt, theta, p, t, y,
                                                  raw, outputs))
    except Exception as e:  # never lose a solved result to its ranking
        log.error("job %s: ranking failed:\n%s", job_id, traceback.format_exc())
        return [{"output": ranking.Output.from_json(o).to_json(), "label": ranking.Output.from_json(o).label(),
                 "value": None, "t": None, "entries": [],
                 "note": f"could not be computed (internal error: {type(e).__name__})"} for o in outputs]


def run_job(store: JobStore, job_id: str) -> str:
    """Claim and run ``job_id``. Returns what happened (for logs and tests)."""
    status, attempt = store.claim(job_id)
    if status != "claimed":
        log.info("job %s not claimed: %s", job_id, status)
        return status
    with Heartbeat(store, job_id, attempt) as beat:
        state, outcome, message, summary, blob, progress = _solve(store, job_id, beat)
        if beat.fenced:
            log.warning("job %s attempt %s was fenced out; result dropped", job_id, attempt)
            return "fenced"
        written = beat.write(f"finish of job {job_id}",
                             lambda: store.finish(job_id, attempt, state, outcome, message, summary, blob,
                                                  progress))
    if written is None:
        return "lease_lost"
    if written:  # operations metrics (jobs/metrics.py)
        metrics.job_finished(store.r, store.keys, job_id)
    return state if written else "fenced"


def _solve(store: JobStore, job_id: str, beat: Heartbeat):
    try:
        spec = JobSpecSchema().load(store.spec(job_id))
        # the job's wall-time limit covers preparation and solve; both end before Celery's
        # soft limit, inside the engine, with diagnostics
        wall = min(spec["limits"]["max_wall_seconds"], max(store.settings.soft_time_limit - 30, 1))
        t_prep = time.perf_counter()
        sens = spec.get("sensitivity")
        sm = None
        with bounded(wall):
            if sens:  # the model with its sensitivity equations (engine.sensitivities)
                sm = prepare_sensitivities(spec["model"], sens["parameters"], sens["initial"])
                base = sm.base
                prepared, machine_code = native.choose(sm.augmented, spec["machine_code"])  # its own content hash
            else:
                prepared, machine_code = native.choose(prepare(spec["model"]), spec["machine_code"])
                base = prepared
        prepare_seconds = time.perf_counter() - t_prep
        p, y0 = base.with_overrides(spec["parameters"], spec["initial"])
        times = output_times(spec["span"], spec["output"])
        options = solver_options(spec, base, wall_cap=max(wall - prepare_seconds, 0.01))
        theta = None
        if sm is not None:
            theta = sm.values(p, y0)
            options = dataclasses.replace(
                options, atol=sm.atol(options.atol, p, y0, sens["error_control"]),
                nonnegative=sm.nonnegative(options.nonnegative), state_names=tuple(prepared.state_names))
            y0 = sm.initial_state(y0)
        n = len(base.state_names)
        header = {"state_names": list(base.state_names), "aux_names": list(base.aux_names),
                  "units": dict(base.units), "model": base.summary()}
        beat.live = LiveResult(dict(header, event_names=list(base.event_names)), tuple(spec["span"]),
                               1 + n + len(base.aux_names), n_states=n)
        sol = integrate(prepared.kernel, p, y0, tuple(spec["span"]), times, options,
                        monitor=beat.monitor, conservation=prepared.conservation, live=beat.live)
    except PreparationLimit as e:
        log.warning("job %s: %s", job_id, e.message)
        return "failed", e.outcome, e.message, {}, None, None
    except (ValidationError, ModelError) as e:
        return "failed", "invalid_spec", f"the stored spec no longer validates: {e}", {}, None, None
    except Exception as e:  # never let a solve crash the worker
        log.error("job %s crashed in the engine:\n%s", job_id, traceback.format_exc())
        return ("failed", "internal_error", f"internal error while solving ({type(e).__name__}: {e})", {},
                None, None)
    finally:
        beat.live = None  # no snapshot after the run: the finish writes the result
    state = {SUCCEEDED: "succeeded", CANCELLED: "cancelled"}.get(sol.outcome, "failed")
    if sol.machine_code_from is not None:  # a long run moved to machine code mid-way
        m = sol.machine_code_from
        machine_code = {"used": True, "seconds": round(m["seconds"], 6),
                        "reason": f"compiled after {m['after_seconds']:.1f} s on the interpreter; "
                                  f"machine code from t={m['t']:.6g} on"}
    sol.report["machine_code"] = machine_code
    summary = result_blob.json_safe(digest(sol.report, prepare_seconds) | {"t_reached": sol.t_reached})
    events = [{"name": base.event_names[int(i)], "t": float(t), "states": dict(zip(base.state_names, y))}
              for i, t, y in zip(sol.event_index, sol.event_t, sol.event_y)]
    # every run that reached the solver keeps what it computed: a failed, cancelled or
    # time-limited run's states up to the last output time reached, flagged partial
    meta = {"outcome": sol.outcome, "message": sol.message, "partial": state != "succeeded",
            "t_reached": sol.t_reached, "t_end": float(spec["span"][1]), "report": sol.report,
            "events": events, **header}
    arrays = {"t": sol.t, "y": sol.y[:, :n], "aux": sol.aux}
    if sm is not None:
        _, sens_values = split(sm, sol.y, theta)
        arrays["sensitivity"] = sens_values.raw
        arrays["sensitivity_normalised"] = sens_values.normalised  # the engine's, served as is
        meta["sensitivity"] = {"wrt": list(sm.wrt), "theta": [float(v) for v in theta],
                               "error_control": bool(sens["error_control"])}
        if sens.get("rank") and state == "succeeded":  # which parameters matter (calibration.ranking)
            meta["sensitivity"]["ranking"] = _ranking(job_id, spec, sm, theta, p, sol.t, sol.y[:, :n],
                                                      sens_values.raw)
    blob = result_blob.encode(meta, arrays)
    return state, sol.outcome, sol.message, summary, blob, progress_reached(sol.t_reached, spec["span"])
