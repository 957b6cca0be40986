"""Queue settings fit long CPU-bound jobs on an at-least-once Redis broker (common practice)."""
from jobs.queue import celery_config
from jobs.settings import Settings


def test_time_limits_stay_below_the_visibility_timeout():
    # A message not acknowledged within the visibility timeout is delivered again;
    # a job must be ended by the hard limit before that can happen.
    s = Settings()
    cfg = celery_config(s)
    vt = cfg["broker_transport_options"]["visibility_timeout"]
    assert cfg["task_soft_time_limit"] < cfg["task_time_limit"] < vt
    assert s.default_max_wall_seconds < cfg["task_soft_time_limit"]


def test_only_json_crosses_the_queue():
    cfg = celery_config(Settings())
    assert cfg["task_serializer"] == "json" and cfg["accept_content"] == ["json"]


def test_late_acknowledgement_with_one_message_prefetched():
    cfg = celery_config(Settings())
    assert cfg["task_acks_late"] and cfg["task_reject_on_worker_lost"]
    assert cfg["worker_prefetch_multiplier"] == 1


def test_settings_read_the_environment(monkeypatch):
    monkeypatch.setenv("REDIS_URL", "redis://example.invalid:1/2")
    monkeypatch.setenv("STIFFLANE_RESULT_TTL_SECONDS", "60")
    s = Settings.from_env()
    assert s.redis_url == "redis://example.invalid:1/2" and s.result_ttl_seconds == 60
