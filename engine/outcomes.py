"""How a run can end: the named outcomes (part of the wire format) and the tolerance floor.

Numba-free, so the API and the reports can name outcomes without loading the engine.
"""

SUCCEEDED = "succeeded"
TOLERANCE_UNREACHABLE = "tolerance_unreachable"
STEP_UNDERFLOW = "step_underflow"
NEWTON_FAILURE = "newton_failure"
STEP_LIMIT = "step_limit"
TIME_LIMIT = "time_limit"
CANCELLED = "cancelled"
NON_FINITE = "non_finite"
OUTCOMES = (SUCCEEDED, TOLERANCE_UNREACHABLE, STEP_UNDERFLOW, NEWTON_FAILURE, STEP_LIMIT,
            TIME_LIMIT, CANCELLED, NON_FINITE)

MIN_RTOL = 1e-13  # below this, double precision cannot deliver the tolerance
