"""Rosenbrock 4(3): a stiffly accurate Rosenbrock method of order 4(3), 6 stages.

Hairer & Wanner, Solving ODEs II, sec. VI.4 (coefficients of the published
Rosenbrock code of Hairer & Wanner, set 1; see ``engine.integrators.tableaux``). Each step uses one Jacobian and one
LU factorisation of (1/(gamma h) I - J); no Newton iteration. The embedded
error estimate is the last stage increment; dense output of order 3.
"""
from numba import njit

from engine.kernels import vm
from engine.integrators.errors_norm import err_norm
from engine.integrators.linalg import lu_factor, lu_solve, shifted
from engine.integrators.tableaux import RO_A, RO_C, RO_CC, RO_D, RO_DENSE, RO_GAMMA

ORDER = 4


@njit(cache=True, nogil=True, _nrt=False)
def factor(J, h, LU, piv):
    shifted(J, 1.0 / (RO_GAMMA * h), LU)
    return lu_factor(LU, piv)


@njit(cache=True, nogil=True, _nrt=False)
def attempt(kernel, p, regs, t, y, f0, fdt, h, LU, piv, K, ynew, ytmp, err_vec,
            atol, rtol):
    """One step with the factors of (1/(gamma h) I - J) already in LU.

    Returns (error norm, rhs evaluations). K (6 x n) receives the stages.
    """
    n = y.shape[0]
    nfev = 0
    for s in range(6):
        if s == 0:
            for i in range(n):
                K[0, i] = f0[i]
        else:
            for i in range(n):
                acc = y[i]
                for j in range(s):
                    acc += RO_A[s, j] * K[j, i]
                ytmp[i] = acc
            vm.rhs(kernel, t + RO_C[s] * h, ytmp, p, regs, K[s])
            nfev += 1
            for i in range(n):
                acc = 0.0
                for j in range(s):
                    acc += RO_CC[s, j] * K[j, i]
                K[s, i] += acc / h
        if RO_D[s] != 0.0:
            for i in range(n):
                K[s, i] += h * RO_D[s] * fdt[i]
        lu_solve(LU, piv, K[s])
    for i in range(n):
        # ytmp holds the 6th stage point Y6 = Y5 + k5; k6 is the error estimate.
        ynew[i] = ytmp[i] + K[5, i]
        err_vec[i] = K[5, i]
    return err_norm(err_vec, y, ynew, atol, rtol), nfev


@njit(cache=True, nogil=True, _nrt=False)
def prepare_dense(y, ynew, K, cont):
    n = y.shape[0]
    for i in range(n):
        cont[0, i] = y[i]
        cont[1, i] = ynew[i]
        a = 0.0
        b = 0.0
        for j in range(5):
            a += RO_DENSE[0, j] * K[j, i]
            b += RO_DENSE[1, j] * K[j, i]
        cont[2, i] = a
        cont[3, i] = b


@njit(cache=True, nogil=True, _nrt=False)
def dense(cont, s, out):
    s1 = 1.0 - s
    for i in range(out.shape[0]):
        out[i] = cont[0, i] * s1 + s * (cont[1, i] + s1 * (cont[2, i] + s * cont[3, i]))


@njit(cache=True, nogil=True, _nrt=False)
def step_factor(h, h_old, err, err_old, accepted, first):
    """Predictive controller of Hairer & Wanner's published Rosenbrock code (safety 0.9,
    factor in [0.2, 6]). Returns h_new / h."""
    if not (err == err):
        return 0.2
    fac = max(1.0 / 6.0, min(5.0, max(err, 1e-16) ** 0.25 / 0.9))
    if accepted and not first and h_old > 0.0:
        facpred = (h_old / h) * (max(err, 1e-16) ** 2 / err_old) ** 0.25 / 0.9
        facpred = max(1.0 / 6.0, min(5.0, facpred))
        fac = max(fac, facpred)
    return 1.0 / fac
