"""Method coefficients as data (one place, cited).

- Dormand-Prince 5(4) with its continuous extension: Hairer, Norsett & Wanner,
  Solving ODEs I, sec. II.5, Table 5.2 and the dense-output coefficients of
  sec. II.6 (as used by Hairer, Norsett & Wanner's published Dormand-Prince code).
- Radau IIA order 5: Hairer & Wanner, Solving ODEs II, sec. IV.8 (nodes, the
  eigen-decomposition of the inverse coefficient matrix, error vector and the
  collocation interpolant written in powers of the step fraction).
- Rosenbrock 4(3): Hairer & Wanner, Solving ODEs II, sec. VI.4 (the 6-stage stiffly
  accurate Rosenbrock method of order 4(3) of Hairer & Wanner's published Rosenbrock code,
  coefficient set 1) with its order-3 dense output.
"""
import math

import numpy as np

# --- Dormand-Prince 5(4) -------------------------------------------------
DP_C = np.array([0.0, 1 / 5, 3 / 10, 4 / 5, 8 / 9, 1.0, 1.0])
DP_A = np.zeros((7, 7))
DP_A[1, 0] = 1 / 5
DP_A[2, :2] = [3 / 40, 9 / 40]
DP_A[3, :3] = [44 / 45, -56 / 15, 32 / 9]
DP_A[4, :4] = [19372 / 6561, -25360 / 2187, 64448 / 6561, -212 / 729]
DP_A[5, :5] = [9017 / 3168, -355 / 33, 46732 / 5247, 49 / 176, -5103 / 18656]
DP_A[6, :6] = [35 / 384, 0.0, 500 / 1113, 125 / 192, -2187 / 6784, 11 / 84]
# Difference of the 5th- and 4th-order weights (error estimate), 7 stages.
DP_E = np.array([71 / 57600, 0.0, -71 / 16695, 71 / 1920, -17253 / 339200,
                 22 / 525, -1 / 40])
# Continuous extension (order 4), 7 stages.
DP_D = np.array([-12715105075 / 11282082432, 0.0, 87487479700 / 32700410799,
                 -10690763975 / 1880347072, 701980252875 / 199316789632,
                 -1453857185 / 822651844, 69997945 / 29380423])

# --- Radau IIA, 3 stages, order 5 -----------------------------------------
S6 = math.sqrt(6.0)
RA_C = np.array([(4 - S6) / 10, (4 + S6) / 10, 1.0])
RA_E = np.array([-13 - 7 * S6, -13 + 7 * S6, -1.0]) / 3
RA_MU_REAL = 3 + 3 ** (2 / 3) - 3 ** (1 / 3)
RA_MU_RE = 3 + 0.5 * (3 ** (1 / 3) - 3 ** (2 / 3))
RA_MU_IM = -0.5 * (3 ** (5 / 6) + 3 ** (7 / 6))
RA_T = np.array([
    [0.09443876248897524, -0.14125529502095421, 0.03002919410514742],
    [0.25021312296533332, 0.20412935229379994, -0.38294211275726192],
    [1.0, 1.0, 0.0]])
RA_TI = np.array([
    [4.17871859155190428, 0.32768282076106237, 0.52337644549944951],
    [-4.17871859155190428, -0.32768282076106237, 0.47662355450055044],
    [0.50287263494578682, -2.57192694985560522, 0.59603920482822492]])
# Interpolant: y(t_old + x h) = y_old + sum_k (Z^T P)[:, k] x^(k+1).
RA_P = np.array([
    [13 / 3 + 7 * S6 / 3, -23 / 3 - 22 * S6 / 3, 10 / 3 + 5 * S6],
    [13 / 3 - 7 * S6 / 3, -23 / 3 + 22 * S6 / 3, 10 / 3 - 5 * S6],
    [1 / 3, -8 / 3, 10 / 3]])

# --- Rosenbrock 4(3) (coefficient set 1 of Hairer & Wanner's published Rosenbrock code) ----------------
RO_GAMMA = 0.25
RO_C = np.array([0.0, 0.386, 0.21, 0.63, 1.0, 1.0])
RO_D = np.array([0.25, -0.1043, 0.1035, -0.3620000000000023e-01, 0.0, 0.0])
RO_A = np.zeros((6, 6))
RO_A[1, 0] = 0.1544000000000000e+01
RO_A[2, :2] = [0.9466785280815826, 0.2557011698983284]
RO_A[3, :3] = [0.3314825187068521e+01, 0.2896124015972201e+01, 0.9986419139977817]
RO_A[4, :4] = [0.1221224509226641e+01, 0.6019134481288629e+01,
               0.1253708332932087e+02, -0.6878860361058950]
RO_A[5, :5] = [0.1221224509226641e+01, 0.6019134481288629e+01,
               0.1253708332932087e+02, -0.6878860361058950, 1.0]
RO_CC = np.zeros((6, 6))
RO_CC[1, 0] = -0.5668800000000000e+01
RO_CC[2, :2] = [-0.2430093356833875e+01, -0.2063599157091915]
RO_CC[3, :3] = [-0.1073529058151375, -0.9594562251023355e+01, -0.2047028614809616e+02]
RO_CC[4, :4] = [0.7496443313967647e+01, -0.1024680431464352e+02,
                -0.3399990352819905e+02, 0.1170890893206160e+02]
RO_CC[5, :5] = [0.8083246795921522e+01, -0.7981132988064893e+01,
                -0.3152159432874371e+02, 0.1631930543123136e+02,
                -0.6058818238834054e+01]
# Dense output rows: y(t_old + s h) = (1-s) y_old + s (y_new + (1-s)(q1 + s q2)),
# q1 = sum_j RO_DENSE[0, j] k_j, q2 = sum_j RO_DENSE[1, j] k_j (j < 5).
RO_DENSE = np.array([
    [0.1012623508344586e+02, -0.7487995877610167e+01, -0.3480091861555747e+02,
     -0.7992771707568823e+01, 0.1025137723295662e+01],
    [-0.6762803392801253, 0.6087714651680015e+01, 0.1643084320892478e+02,
     0.2476722511418386e+02, -0.6594389125716872e+01]])

# Method identifiers used inside the compiled loop.
DORMAND_PRINCE, RADAU_IIA, ROSENBROCK, BDF = 0, 1, 2, 3
METHOD_NAMES = ("dormand_prince_54", "radau_iia_5", "rosenbrock_4", "bdf")
