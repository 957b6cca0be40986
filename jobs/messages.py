"""Reading the broker's own Redis keys: which job or chunk a queued or unacknowledged message names.

Celery's Redis transport (kombu) keeps a queue as a list of JSON envelopes, pushed on the
left and popped on the right, and every message a worker has taken but not yet
acknowledged in a hash ``unacked`` (delivery tag -> ``[envelope, exchange, routing key]``)
with its delivery time in a sorted set ``unacked_index``; both are global to the Redis
database (kombu's defaults; we set no ``global_keyprefix``). The envelope's body is our
task's arguments as JSON (``[[args], {kwargs}, {embed}]``), base64-encoded.

Only JSON bodies are read, never pickles; anything unexpected reads as None. Nothing here
imports Celery.
"""
from __future__ import annotations

import base64
import json
from typing import Optional

from jobs.keys import is_job_id
from jobs.queue import BATCH_TASK, CALIBRATION_TASK, SOLVE_TASK

UNACKED = "unacked"              # kombu.transport.redis.Channel.unacked_key
UNACKED_INDEX = "unacked_index"  # kombu.transport.redis.Channel.unacked_index_key


def task_of(envelope) -> Optional[tuple[str, list]]:
    """(task name, args) of one message envelope (bytes, str or an already decoded dict)."""
    try:
        if not isinstance(envelope, dict):
            envelope = json.loads(envelope)
        if envelope.get("content-type") != "application/json":
            return None
        body = envelope["body"]
        if envelope.get("properties", {}).get("body_encoding") == "base64":
            body = base64.b64decode(body)
        args = json.loads(body)[0]
        name = envelope.get("headers", {}).get("task")
        return (name, args) if isinstance(name, str) and isinstance(args, list) else None
    except (ValueError, TypeError, KeyError, IndexError, AttributeError):
        return None


def job_id_of(envelope) -> Optional[str]:
    """The job id a solve message names, else None."""
    task = task_of(envelope)
    if task and task[0] == SOLVE_TASK and len(task[1]) == 1 and isinstance(task[1][0], str) \
            and is_job_id(task[1][0]):
        return task[1][0]
    return None


def chunk_of(envelope) -> Optional[tuple[str, int]]:
    """(batch id, chunk) a batch-chunk message names, else None."""
    task = task_of(envelope)
    if task and task[0] == BATCH_TASK and len(task[1]) == 2:
        batch_id, chunk = task[1]
        if isinstance(batch_id, str) and is_job_id(batch_id) and isinstance(chunk, int) and chunk >= 0:
            return batch_id, chunk
    return None


def calibration_unit_of(envelope) -> Optional[tuple[str, int]]:
    """(calibration id, unit) a calibration message names, else None."""
    task = task_of(envelope)
    if task and task[0] == CALIBRATION_TASK and len(task[1]) == 2:
        cal_id, unit = task[1]
        if isinstance(cal_id, str) and is_job_id(cal_id) and isinstance(unit, int) and unit >= 0:
            return cal_id, unit
    return None


def unacked_entry(raw) -> Optional[tuple[dict, str]]:
    """(envelope, routing key) of one ``unacked`` hash value, else None."""
    try:
        envelope, _exchange, routing_key = json.loads(raw)
    except (ValueError, TypeError):
        return None
    return (envelope, routing_key) if isinstance(envelope, dict) and isinstance(routing_key, str) else None
