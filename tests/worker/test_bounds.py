"""Model preparation in a worker is bounded in wall time and in memory growth."""
import time

import numpy as np
import pytest

from worker.bounds import PreparationLimit, bounded, resident_bytes


def test_a_slow_preparation_ends_as_time_limit_with_a_message():
    with pytest.raises(PreparationLimit) as e:
        with bounded(0.2):
            deadline = time.monotonic() + 30
            while time.monotonic() < deadline:  # Python work, as preparing a model is
                sum(range(1000))
    assert e.value.outcome == "time_limit" and "max_wall_seconds" in e.value.message


def test_a_preparation_that_grows_memory_ends_as_memory_limit():
    held = []
    with pytest.raises(PreparationLimit) as e:
        with bounded(60.0, max_growth=64 * 2**20):
            for _ in range(400):  # up to 400 MB in 1 MB steps, touched so they are resident
                held.append(np.ones(2**17))
                time.sleep(0.002)
    assert e.value.outcome == "memory_limit" and "64 MB" in e.value.message
    assert len(held) < 400
    held.clear()


def test_a_preparation_within_bounds_runs_and_leaves_no_timer_behind():
    with bounded(5.0, max_growth=2**30):
        value = sum(range(10_000))
    assert value == 49995000 and resident_bytes() > 0
    time.sleep(0.05)  # a leftover alarm would end the test process here
