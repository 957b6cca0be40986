"""Layout of the plain arrays that hold a run's solver state between chunks.

The compiled loop keeps scalars in ``fs`` (float64) and ``iw`` (int64); these
names index them. Vector work space is one (N_ROWS, n) array ``V``.
"""
# fs: float scalars
F_T, F_H, F_TEND, F_HMAX, F_ERR_OLD, F_H_OLD, F_T_OLD, F_H_LAST = range(8)
F_RHO, F_RTOL, F_NEWTON_TOL, F_EXPL_NEEDED, F_T_BAD, F_RATE, F_HEXP = range(8, 15)
F_T0, F_H_LU, F_RHO_J, F_H_JCHECK = 15, 16, 17, 18
N_FS = 19

# iw: integer scalars and counters. I_SWITCH_RETURNS: 1 = the compiled loop returns to
# Python after a method switch (each method's time is measured; the sparse path dispatches
# there), 0 = it runs on through switches.
(I_METHOD, I_PINNED, I_STATUS, I_ACCEPTED, I_REJECTED, I_NFEV, I_NJEV, I_NLU,
 I_NEWTON_IT, I_NEWTON_FAIL, I_MAX_STEPS, I_IOUT, I_STIFF_POS, I_STIFF_NEG,
 I_STEPS_IN_METHOD, I_NSWITCH, I_HIST_N, I_HIST_STRIDE, I_FIRST, I_LAST_REJECTED,
 I_JAC_CURRENT, I_LU_VALID, I_CONT_METHOD, I_HAVE_CONT, I_NEV_LOG, I_NEV_TOTAL,
 I_SWITCH_RETURNS, I_SPARE27, I_SPARE28, I_NONNEG, I_HAS_TIME,
 I_FAIL_STREAK, I_FAIL_KIND, I_TERMINAL, I_RETURN, I_NONNEG_REJECTS) = range(36)
# accepted steps per method id (engine.integrators.tableaux): four slots from I_STEPS_DORMAND_PRINCE
I_STEPS_DORMAND_PRINCE, I_STEPS_RADAU_IIA, I_STEPS_ROSENBROCK, I_STEPS_BDF = 36, 37, 38, 39
I_ORDER, I_EQUAL_STEPS = 40, 41  # variable-order BDF (sparse path)
N_IW = 42

# I_STATUS values (mapped to outcome names by engine.integrate)
RUNNING, DONE, ST_STEP_UNDERFLOW, ST_NEWTON_FAILURE, ST_STEP_LIMIT, ST_NON_FINITE = range(6)
# I_FAIL_KIND values
FAIL_NONE, FAIL_ERROR, FAIL_NEWTON, FAIL_NONFINITE, FAIL_SINGULAR = range(5)

# Rows of V
V_K = 0          # 0..6: stage derivatives (dormand_prince_54: 7, rosenbrock_4: 6)
V_YNEW = 7
V_YTMP = 8
V_ERR = 9
V_SCALE = 10
V_F0 = 11        # f(t, y) at the current accepted point
V_FDT = 12       # df/dt (Rosenbrock, time-dependent models)
V_Z = 13         # 13..15 Radau stage increments
V_W = 16         # 16..18 transformed increments
V_F = 19         # 19..21 stage derivatives
V_PV = 22        # power-iteration vector
V_PW = 23
V_DENSE = 24     # scratch for dense evaluations
V_YEV = 25       # event-location scratch
V_YOLD = 26
V_NNMASK = 27     # 1.0 where a state must stay non-negative
N_ROWS = 28

HIST_COLUMNS = ("t", "h", "method", "explicit_step")
