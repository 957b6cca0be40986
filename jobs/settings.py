"""Settings shared by the API and the worker, read from the environment.

Every setting has a default that works for one machine (``make run``); the
README's configuration table lists them.
"""
from __future__ import annotations

import os
from dataclasses import dataclass, fields


def _env(name: str, default, cast):
    raw = os.environ.get(name)
    return default if raw in (None, "") else cast(raw)


@dataclass(frozen=True)
class Settings:
    redis_url: str = "redis://127.0.0.1:6390/0"
    key_prefix: str = "sl"
    redis_timeout_seconds: float = 1.5   # a hung Redis gives a 503 within 2 s, never a hang
    result_ttl_seconds: int = 7 * 24 * 3600
    lease_seconds: float = 6.0           # a running attempt must heartbeat within this (every 1 s)
    max_attempts: int = 3                # a job that kills its worker this often is failed
    interactive_queue: str = "stifflane.jobs"
    soft_time_limit: int = 3000          # seconds; both below the visibility timeout
    hard_time_limit: int = 3300
    visibility_timeout: int = 3600
    default_max_wall_seconds: float = 600.0
    max_body_bytes: int = 2 * 1024 * 1024
    max_output_points: int = 100_000
    auth_mode: str = "keys"              # "keys": Bearer API keys required; "off": one local owner
    rate_limit: int = 600                # requests per owner per rate window
    rate_window_seconds: int = 60
    address_rate_limit: int = 300        # requests without a valid key per client address per window
    max_active_jobs: int = 2000          # queued + running jobs per owner
    batch_queue: str = "stifflane.batches"   # chunks of batches (jobs/batch_store.py)
    max_batch_members: int = 100_000
    batch_chunk_size: int = 200          # members per chunk unless the batch says otherwise
    batch_max_chunks: int = 5_000        # larger chunks for larger batches beyond this
    batch_chunks_in_flight: int = 8      # published, unfinished chunks per owner (shared by its batches)
    max_batch_trajectory_values: int = 5_000_000
    batch_stale_seconds: int = 60        # a published chunk unclaimed this long is published again
    # calibrations (jobs/calibration_store.py, docs/calibration.md)
    calibration_chunk_size: int = 2        # starts per unit of work
    calibration_chunks_in_flight: int = 8  # published, unfinished chunks per owner (shared by its calibrations)
    max_calibration_starts: int = 200
    max_calibration_rows: int = 20_000     # measurement rows in all experiments together
    max_calibration_experiments: int = 100
    max_calibration_unknowns: int = 20
    max_calibration_body_bytes: int = 2 * 1024 * 1024  # never above max_body_bytes (the front's limit)
    max_active_calibrations: int = 20      # queued + running calibrations per owner
    metrics_access: str = "admin"        # /metrics: "admin" (an admin key), "public" (no key), "off" (404)

    @classmethod
    def from_env(cls) -> "Settings":
        values = {}
        for f in fields(cls):
            cast = type(f.default)
            values[f.name] = _env("STIFFLANE_" + f.name.upper(), f.default, cast)
        # REDIS_URL is the conventional name; it wins over the prefixed one.
        values["redis_url"] = os.environ.get("REDIS_URL") or values["redis_url"]
        return cls(**values)
