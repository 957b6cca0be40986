"""The queue contract shared by API and worker: task name, Celery settings, publisher.

Messages carry only the job id; the job record in Redis is the source of truth.
Settings fit long CPU-bound jobs on Redis: JSON only, late acknowledgement,
reject on worker lost, prefetch of one, time limits below the visibility timeout.
"""
from __future__ import annotations

from celery import Celery

from jobs.settings import Settings

SOLVE_TASK = "stifflane.solve"
BATCH_TASK = "stifflane.batch_chunk"  # args: [batch_id, chunk index]; on settings.batch_queue
# args: [calibration_id, unit]; units 0..n-1 run starts, unit n writes the estimate; on settings.batch_queue
CALIBRATION_TASK = "stifflane.calibration_chunk"


def celery_config(settings: Settings) -> dict:
    return {
        "broker_url": settings.redis_url,
        "task_serializer": "json",
        "accept_content": ["json"],
        "result_accept_content": ["json"],
        "task_ignore_result": True,
        "task_acks_late": True,
        "task_reject_on_worker_lost": True,
        "worker_prefetch_multiplier": 1,
        "task_default_queue": settings.interactive_queue,
        "task_soft_time_limit": settings.soft_time_limit,
        "task_time_limit": settings.hard_time_limit,
        "broker_transport_options": {"visibility_timeout": settings.visibility_timeout},
        "broker_connection_retry_on_startup": True,
        "worker_hijack_root_logger": False,
        "worker_send_task_events": False,
    }


def make_celery(settings: Settings, name: str = "stifflane") -> Celery:
    app = Celery(name)
    app.conf.update(celery_config(settings))
    return app


class Publisher:
    """Sends job ids to the queue by task name (the API never imports the worker)."""

    def __init__(self, settings: Settings):
        self.settings = settings
        self.celery = make_celery(settings, "stifflane-publisher")

    def publish(self, job_id: str) -> None:
        self.celery.send_task(SOLVE_TASK, args=[job_id], queue=self.settings.interactive_queue)

    def publish_chunk(self, batch_id: str, chunk: int) -> None:
        """One chunk of a batch, on the batch queue (workers also serve the interactive one)."""
        self.celery.send_task(BATCH_TASK, args=[batch_id, int(chunk)], queue=self.settings.batch_queue)

    def publish_calibration(self, calibration_id: str, unit: int) -> None:
        """One chunk of a calibration's starts, or its summary, on the batch queue."""
        self.celery.send_task(CALIBRATION_TASK, args=[calibration_id, int(unit)], queue=self.settings.batch_queue)
