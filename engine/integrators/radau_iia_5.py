"""Radau IIA of order 5 (3 stages): one step, its interpolant, its controller.

Hairer & Wanner, Solving ODEs II, sec. IV.8: simplified Newton iterations on
the transformed collocation system, split into one real and one complex
linear system of size n (the coefficient matrix's eigenvalues are one real and
a complex pair); the Jacobian and the two LU factors are reused while Newton
converges well; third-order embedded error estimate filtered through the real
factor; collocation polynomial as dense output; Gustafsson's predictive step
controller.
"""
import math

import numpy as np
from numba import njit

from engine.kernels import vm
from engine.integrators.errors_norm import err_norm
from engine.integrators.linalg import clu_factor, clu_solve, cshifted, lu_factor, lu_solve, shifted
from engine.integrators.tableaux import (RA_C, RA_E, RA_MU_IM, RA_MU_RE, RA_MU_REAL, RA_P, RA_T,
                             RA_TI)

NEWTON_MAXITER = 7
ORDER = 3  # order used for the starting step (that of the error estimate)


@njit(cache=True, nogil=True, _nrt=False)
def factor(J, h, LU, piv, LUc, pivc):
    """Factor MU_REAL/h I - J and MU_COMPLEX/h I - J. False if singular."""
    shifted(J, RA_MU_REAL / h, LU)
    ok = lu_factor(LU, piv)
    cshifted(J, RA_MU_RE / h, RA_MU_IM / h, LUc)
    return ok and clu_factor(LUc, pivc)


@njit(cache=True, nogil=True, _nrt=False, inline="always")
def predict(cont, have_cont, t_old, h_old, t, h, y, Z):
    """Starting guess for the stage increments Z from the last interpolant."""
    n = y.shape[0]
    if not have_cont:
        Z[:, :] = 0.0
        return
    for s in range(3):
        x = (t + RA_C[s] * h - t_old) / h_old
        for i in range(n):
            v = cont[0, i] + x * (cont[1, i] + x * (cont[2, i] + x * cont[3, i]))
            Z[s, i] = v - y[i]


@njit(cache=True, nogil=True, _nrt=False)
def too_slow(rate, k, dw, tol):
    """After iteration k with contraction ``rate`` and increment norm ``dw``: True when
    Newton is not expected to reach ``tol`` within NEWTON_MAXITER iterations."""
    rk = 1.0  # rate ** (NEWTON_MAXITER - k), by multiplication
    for _ in range(NEWTON_MAXITER - k):
        rk *= rate
    return rate >= 1.0 or rk / (1.0 - rate) * dw > tol


@njit(cache=True, nogil=True, _nrt=False)
def newton(kernel, p, regs, t, y, h, LU, piv, LUc, pivc, Z, W, F, ytmp, cbuf,
           scale, tol):
    """Simplified Newton on the collocation system.

    Returns (converged, iterations, rate, rhs evaluations).
    """
    n = y.shape[0]
    mr = RA_MU_REAL / h
    mc = complex(RA_MU_RE, RA_MU_IM) / h
    for s in range(3):
        for i in range(n):
            W[s, i] = RA_TI[s, 0] * Z[0, i] + RA_TI[s, 1] * Z[1, i] + RA_TI[s, 2] * Z[2, i]
    dw_old = -1.0
    rate = 1.0
    nfev = 0
    for k in range(NEWTON_MAXITER):
        finite = True
        for s in range(3):
            for i in range(n):
                ytmp[i] = y[i] + Z[s, i]
            vm.rhs(kernel, t + RA_C[s] * h, ytmp, p, regs, F[s])
            nfev += 1
            for i in range(n):
                if not np.isfinite(F[s, i]):
                    finite = False
        if not finite:
            return False, k + 1, -1.0, nfev
        dsum = 0.0
        for i in range(n):
            fr = RA_TI[0, 0] * F[0, i] + RA_TI[0, 1] * F[1, i] + RA_TI[0, 2] * F[2, i]
            f1 = RA_TI[1, 0] * F[0, i] + RA_TI[1, 1] * F[1, i] + RA_TI[1, 2] * F[2, i]
            f2 = RA_TI[2, 0] * F[0, i] + RA_TI[2, 1] * F[1, i] + RA_TI[2, 2] * F[2, i]
            ytmp[i] = fr - mr * W[0, i]
            cbuf[i] = complex(f1, f2) - mc * complex(W[1, i], W[2, i])
        lu_solve(LU, piv, ytmp)
        clu_solve(LUc, pivc, cbuf)
        for i in range(n):
            a = ytmp[i] / scale[i]
            b = cbuf[i].real / scale[i]
            c = cbuf[i].imag / scale[i]
            dsum += a * a + b * b + c * c
        dw = math.sqrt(dsum / (3 * max(n, 1)))
        if dw_old > 0.0:
            rate = dw / dw_old
            if too_slow(rate, k, dw, tol):
                return False, k + 1, rate, nfev
        for i in range(n):
            W[0, i] += ytmp[i]
            W[1, i] += cbuf[i].real
            W[2, i] += cbuf[i].imag
        for s in range(3):
            for i in range(n):
                Z[s, i] = RA_T[s, 0] * W[0, i] + RA_T[s, 1] * W[1, i] + RA_T[s, 2] * W[2, i]
        if dw == 0.0 or (dw_old > 0.0 and rate / (1.0 - rate) * dw < tol):
            return True, k + 1, rate, nfev
        dw_old = dw
    return False, NEWTON_MAXITER, rate, nfev


@njit(cache=True, nogil=True, _nrt=False)
def error(kernel, p, regs, t, y, f0, h, LU, piv, Z, ynew, err_vec, ytmp, atol, rtol,
          refine):
    """Embedded error estimate; ``refine`` applies one extra filtering
    (used after a rejection or on the first step). Returns (norm, rhs evals)."""
    n = y.shape[0]
    for i in range(n):
        ynew[i] = y[i] + Z[2, i]
        ze = (RA_E[0] * Z[0, i] + RA_E[1] * Z[1, i] + RA_E[2] * Z[2, i]) / h
        ytmp[i] = ze
        err_vec[i] = f0[i] + ze
    lu_solve(LU, piv, err_vec)
    err = err_norm(err_vec, y, ynew, atol, rtol)
    nfev = 0
    if refine and err > 1.0:
        for i in range(n):
            err_vec[i] = y[i] + err_vec[i]
        vm.rhs(kernel, t, err_vec, p, regs, ynew)  # ynew as scratch
        nfev = 1
        for i in range(n):
            err_vec[i] = ynew[i] + ytmp[i]
            ynew[i] = y[i] + Z[2, i]
        lu_solve(LU, piv, err_vec)
        err = err_norm(err_vec, y, ynew, atol, rtol)
    return err, nfev


@njit(cache=True, nogil=True, _nrt=False, inline="always")
def prepare_dense(y, Z, cont):
    """cont[0] = y_old, cont[1:4] = Z^T P (collocation polynomial)."""
    n = y.shape[0]
    for i in range(n):
        cont[0, i] = y[i]
        for k in range(3):
            cont[1 + k, i] = Z[0, i] * RA_P[0, k] + Z[1, i] * RA_P[1, k] + Z[2, i] * RA_P[2, k]


@njit(cache=True, nogil=True, _nrt=False)
def dense(cont, x, out):
    for i in range(out.shape[0]):
        out[i] = cont[0, i] + x * (cont[1, i] + x * (cont[2, i] + x * cont[3, i]))


@njit(cache=True, nogil=True, _nrt=False)
def step_factor(h, h_old, err, err_old, n_iter, accepted):
    """Gustafsson's predictive controller with the Newton-iteration safety factor."""
    safety = 0.9 * (2 * NEWTON_MAXITER + 1) / (2 * NEWTON_MAXITER + n_iter)
    if not (err == err):
        return 0.25
    if err_old <= 0.0 or h_old <= 0.0 or err == 0.0:
        mult = 1.0
    else:
        mult = h / h_old * math.sqrt(math.sqrt(err_old / err))  # (err_old/err)^(1/4)
    fac = min(1.0, mult) / math.sqrt(math.sqrt(max(err, 1e-10)))
    if accepted:
        return min(10.0, safety * fac)
    return max(0.2, safety * fac)
