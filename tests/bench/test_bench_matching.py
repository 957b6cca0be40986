"""Digits and matched-accuracy interpolation (bench/matching.py)."""
import math

import numpy as np
import pytest

from bench import matching


def test_digits_is_minus_log10_of_the_worst_scaled_error():
    ref = np.array([1.0, 1e-3])
    y = np.array([1.0 + 1e-6, 1e-3 * (1 + 1e-4)])
    # errors scaled by |ref| + floor: 1e-6 / 1 and 1e-7 / (1e-3 + 0) -> worst 1e-4
    assert matching.digits(y, ref, 0.0) == pytest.approx(4.0)


def test_floor_limits_the_weight_of_tiny_components():
    ref = np.array([1.0, 1e-12])
    y = np.array([1.0, 2e-12])  # 100 % wrong on a component below the floor
    assert matching.digits(y, ref, 1e-6) == pytest.approx(6.0, abs=1e-5)


def test_exact_answers_count_as_sixteen_digits_and_missing_ones_as_none():
    ref = np.array([0.5, 2.0])
    assert matching.digits(ref.copy(), ref, 1e-8) == 16.0
    assert matching.digits(None, ref, 1e-8) is None
    assert matching.digits(np.array([np.nan, 2.0]), ref, 1e-8) is None


def _rec(d, s, status="ok"):
    return {"digits": d, "seconds": s, "status": status}


def test_seconds_interpolate_linearly_in_digits_and_log_time():
    recs = [_rec(4.0, 1e-3), _rec(6.0, 1e-1)]
    assert matching.seconds_at(recs, 5.0) == pytest.approx(1e-2)
    assert matching.seconds_at(recs, 4.0) == pytest.approx(1e-3)


def test_no_extrapolation_beyond_the_measured_range():
    recs = [_rec(4.0, 1e-3), _rec(6.0, 1e-1)]
    assert matching.seconds_at(recs, 8.0) is None
    assert matching.seconds_at(recs, 2.0) is None
    assert matching.seconds_at(recs, 6.2) == pytest.approx(1e-1)  # within the slack


def test_failed_runs_are_not_on_the_curve():
    recs = [_rec(4.0, 1e-3), _rec(9.0, 1e-6, status="timeout"), _rec(6.0, 1e-1)]
    assert [d for d, _ in matching.curve(recs)] == [4.0, 6.0]


def test_a_cheaper_run_with_more_digits_bounds_the_cost():
    # non-monotone: the 7-digit run was cheaper than the 5-digit one
    recs = [_rec(4.0, 1e-3), _rec(5.0, 1e-1), _rec(7.0, 1e-2)]
    assert matching.seconds_at(recs, 5.0) == pytest.approx(1e-2)


def test_speedup_compares_two_solvers_at_the_same_digits():
    fast = [_rec(4.0, 1e-4), _rec(8.0, 1e-3)]
    slow = [_rec(4.0, 1e-2), _rec(8.0, 1e-1)]
    assert matching.speedup(fast, slow, 6.0) == pytest.approx(100.0)
    assert math.isclose(matching.speedup(slow, fast, 6.0), 0.01)
