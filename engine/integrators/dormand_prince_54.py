"""Dormand-Prince 5(4): one step, its dense output and its stiffness test.

Hairer, Norsett & Wanner, Solving ODEs I, sec. II.5 (method and PI step
control) and II.6 (dense output); stiffness detection from the last two stages,
which share the point t + h: Hairer & Wanner, Solving ODEs II, sec. IV.2.
Stage derivatives live in ``K`` (7 x n); ``K[0]`` holds f(t, y) on entry and,
after an accepted step, ``K[6]`` is f at the new point (first same as last).
"""
import math

from numba import njit

from engine.kernels import vm
from engine.integrators.errors_norm import err_norm
from engine.integrators.tableaux import DP_A, DP_C, DP_D, DP_E

# Real-axis stability boundary of the method: |R(z)| <= 1 for z in [-3.3, 0]
# (computed from the stability polynomial in the tests).
BOUNDARY = 3.3
ORDER = 5
STAGE_EVALS = 6


@njit(cache=True, nogil=True, _nrt=False)
def attempt(kernel, p, regs, t, y, h, K, ynew, ysti, err_vec, atol, rtol):
    """Try one step of size h. Returns (error norm, spectral-radius estimate)."""
    n = y.shape[0]
    for s in range(1, 7):
        for i in range(n):
            acc = 0.0
            for j in range(s):
                acc += DP_A[s, j] * K[j, i]
            if s == 6:
                ynew[i] = y[i] + h * acc
            else:
                ysti[i] = y[i] + h * acc
        if s == 6:
            vm.rhs(kernel, t + h, ynew, p, regs, K[6])
        else:
            vm.rhs(kernel, t + DP_C[s] * h, ysti, p, regs, K[s])
    # ysti now holds the 6th stage point (t + h), shared with ynew.
    num = 0.0
    den = 0.0
    ysq = 0.0
    for i in range(n):
        ysq += y[i] * y[i]
        acc = 0.0
        for j in range(7):
            acc += DP_E[j] * K[j, i]
        err_vec[i] = h * acc
        d = K[6, i] - K[5, i]
        num += d * d
        d = ynew[i] - ysti[i]
        den += d * d
    err = err_norm(err_vec, y, ynew, atol, rtol)
    # Differences at round-off level carry no information about rho.
    rho = math.sqrt(num / den) if den > 1e-28 * ysq + 1e-300 else 0.0
    return err, rho


@njit(cache=True, nogil=True, _nrt=False, inline="always")
def prepare_dense(y, ynew, h, K, cont):
    """Fill cont[0:5] with the continuous-extension coefficients of the step."""
    n = y.shape[0]
    for i in range(n):
        ydiff = ynew[i] - y[i]
        bspl = h * K[0, i] - ydiff
        cont[0, i] = y[i]
        cont[1, i] = ydiff
        cont[2, i] = bspl
        cont[3, i] = ydiff - h * K[6, i] - bspl
        acc = 0.0
        for j in range(7):
            acc += DP_D[j] * K[j, i]
        cont[4, i] = h * acc


@njit(cache=True, nogil=True, _nrt=False)
def dense(cont, theta, out):
    """y(t_old + theta h) from the coefficients of :func:`prepare_dense`."""
    th1 = 1.0 - theta
    for i in range(out.shape[0]):
        out[i] = cont[0, i] + theta * (cont[1, i] + th1 * (
            cont[2, i] + theta * (cont[3, i] + th1 * cont[4, i])))


@njit(cache=True, nogil=True, _nrt=False)
def step_factor(err, err_old, last_rejected):
    """PI controller of Hairer, Norsett & Wanner's published Dormand-Prince code (beta = 0.04, safety 0.9).

    Returns the factor h_new / h.
    """
    beta = 0.04
    expo1 = 0.2 - beta * 0.75
    if not (err == err):  # NaN: shrink hard
        return 0.2
    fac11 = max(err, 1e-16) ** expo1
    if err <= 1.0:
        fac = fac11 / (err_old ** beta) / 0.9
        fac = max(0.1, min(5.0, fac))
        f = 1.0 / fac
        if last_rejected:
            f = min(f, 1.0)
        return f
    return 1.0 / min(5.0, fac11 / 0.9)
