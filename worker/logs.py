"""The worker's logs as JSON lines with the job id (STIFFLANE_LOG_FORMAT=json; see jobs/logs.py).

Imported by worker/celery_app.py: Celery's and our handlers get the JSON formatter once Celery
has set up logging, and every line logged while a task runs carries its ``job_id`` (or
``batch_id`` and ``chunk``), Celery's own "Task ... succeeded" line included.
"""
from __future__ import annotations

from celery import signals

from jobs import logs
from jobs.queue import BATCH_TASK, SOLVE_TASK

_tokens: dict = {}
if logs.log_format() == "json":
    import logging

    logging.captureWarnings(True)  # Python warnings become log lines (JSON) rather than raw stderr text


def _ids(task_name: str, args) -> dict:
    args = list(args or ())
    if task_name == SOLVE_TASK and args:
        return {"job_id": str(args[0])}
    if task_name == BATCH_TASK and len(args) >= 2:
        return {"batch_id": str(args[0]), "chunk": args[1]}
    return {}


@signals.after_setup_logger.connect(weak=False)
@signals.after_setup_task_logger.connect(weak=False)
def _json_handlers(logger=None, **_):
    if logger is not None and logs.log_format() == "json":
        logs.use_json(logger)


@signals.task_prerun.connect(weak=False)
def _enter_task(task_id=None, task=None, args=None, **_):
    _tokens[task_id] = logs.set_scope(**_ids(getattr(task, "name", ""), args))


@signals.task_postrun.connect(weak=False)
def _leave_task(task_id=None, **_):
    logs.reset_scope(_tokens.pop(task_id, None))
