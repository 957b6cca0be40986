"""One attempted step of each dense-path method, with its bookkeeping.

Each ``try_*`` function takes the step size h, runs the method's attempt
(engine.integrators.dormand_prince_54 / radau_iia_5 / rosenbrock_4), applies the method's step-size controller
and either prepares the step's interpolant (accepted: returns True) or books
a rejection. Counters and failure kinds go into the driver's state arrays.
"""
import numpy as np
from numba import njit

from engine.integrators import dormand_prince_54, radau_iia_5, rosenbrock_4, switching
from engine.kernels import vm
from engine.integrators.state import (FAIL_ERROR, FAIL_NEWTON, FAIL_NONFINITE, FAIL_SINGULAR,
                          F_ERR_OLD, F_H, F_H_LAST, F_H_LU, F_H_OLD, F_HEXP, F_NEWTON_TOL,
                          F_RATE, F_RHO, F_RHO_J, F_RTOL, F_T, F_T_BAD, F_T_OLD,
                          I_CONT_METHOD, I_FIRST, I_HAS_TIME, I_HAVE_CONT, I_JAC_CURRENT,
                          I_LAST_REJECTED, I_LU_VALID, I_FAIL_KIND, I_NEWTON_FAIL,
                          I_NEWTON_IT, I_NFEV, I_NJEV, I_NLU, I_NONNEG, I_NONNEG_REJECTS,
                          I_REJECTED, V_ERR, V_F, V_F0, V_FDT, V_K, V_NNMASK, V_PV, V_PW,
                          V_SCALE, V_W, V_YNEW, V_YTMP, V_Z)
from engine.integrators.switching import P_BOUNDARY, P_POWER_ITERS
from engine.integrators.tableaux import RADAU_IIA

EPS = 2.220446049250313e-16


@njit(cache=True, nogil=True, _nrt=False)
def nonneg_check(ynew, y, atol, rtol, mask):
    """0: all >= 0; 1: small negatives (clip); 2: significantly negative."""
    worst = 0
    for i in range(y.shape[0]):
        if ynew[i] < 0.0 and mask[i] != 0.0:
            if ynew[i] < -(atol[i] + rtol * abs(y[i])):
                return 2
            worst = 1
    return worst


@njit(cache=True, nogil=True, _nrt=False)
def reject(fs, iw, h, fac, kind):
    iw[I_REJECTED] += 1
    iw[I_LAST_REJECTED] = 1
    iw[I_FAIL_KIND] = kind
    if kind == FAIL_NONFINITE:
        fs[F_T_BAD] = fs[F_T] + h
    fs[F_H] = h * fac


@njit(cache=True, nogil=True, _nrt=False)
def new_jacobian(kernel, p, regs, t, y, fs, iw, V, J, jv, pol):
    vm.jac_dense(kernel, t, y, p, regs, jv, J)
    iw[I_NJEV] += 1
    iw[I_JAC_CURRENT] = 1
    iw[I_LU_VALID] = 0
    rho = switching.spectral_radius(J, V[V_PV], V[V_PW], int(pol[P_POWER_ITERS]))
    fs[F_RHO] = rho
    fs[F_HEXP] = pol[P_BOUNDARY] / rho if rho > 0.0 else np.inf


@njit(cache=True, nogil=True, _nrt=False)
def try_dormand_prince_54(kernel, p, regs, y, atol, fs, iw, V, cont, pol, h):
    K = V[V_K:V_K + 7]
    ynew = V[V_YNEW]
    rtol = fs[F_RTOL]
    err, rho = dormand_prince_54.attempt(kernel, p, regs, fs[F_T], y, h, K, ynew, V[V_YTMP],
                              V[V_ERR], atol, rtol)
    iw[I_NFEV] += dormand_prince_54.STAGE_EVALS
    fs[F_RATE] = rho  # kept for the instability check of automatic mode
    if not (err < np.inf):
        reject(fs, iw, h, 0.2, FAIL_NONFINITE)
        return False
    if err <= 1.0 and iw[I_NONNEG] and nonneg_check(ynew, y, atol, rtol, V[V_NNMASK]) == 2:
        iw[I_NONNEG_REJECTS] += 1
        reject(fs, iw, h, 0.5, FAIL_ERROR)
        return False
    fac = dormand_prince_54.step_factor(err, fs[F_ERR_OLD], iw[I_LAST_REJECTED])
    if err > 1.0:
        reject(fs, iw, h, fac, FAIL_ERROR)
        return False
    fs[F_ERR_OLD] = max(err, 1e-4)
    rho = max(rho, fs[F_RHO_J])
    fs[F_RHO] = rho
    fs[F_HEXP] = pol[P_BOUNDARY] / rho if rho > 0.0 else np.inf
    fs[F_H] = h * fac  # the interpolant is built only when needed (driver._finish)
    return True


@njit(cache=True, nogil=True, _nrt=False)
def try_radau_iia_5(kernel, p, regs, y, atol, fs, iw, V, cont, J, jv, LU, piv, LUc,
                pivc, cbuf, pol, h):
    t = fs[F_T]
    rtol = fs[F_RTOL]
    n = y.shape[0]
    if iw[I_JAC_CURRENT] < 0:
        new_jacobian(kernel, p, regs, t, y, fs, iw, V, J, jv, pol)
    if iw[I_LU_VALID] == 0 or fs[F_H_LU] != h:
        iw[I_NLU] += 1
        if not radau_iia_5.factor(J, h, LU, piv, LUc, pivc):
            iw[I_LU_VALID] = 0
            reject(fs, iw, h, 0.5, FAIL_SINGULAR)
            return False
        iw[I_LU_VALID] = 1
        fs[F_H_LU] = h
    scale = V[V_SCALE]
    for i in range(n):
        scale[i] = atol[i] + rtol * abs(y[i])
    Z = V[V_Z:V_Z + 3]
    radau_iia_5.predict(cont, iw[I_HAVE_CONT] == 1 and iw[I_CONT_METHOD] == RADAU_IIA,
                   fs[F_T_OLD], fs[F_H_LAST], t, h, y, Z)
    conv, nit, rate, nf = radau_iia_5.newton(kernel, p, regs, t, y, h, LU, piv, LUc, pivc,
                                        Z, V[V_W:V_W + 3], V[V_F:V_F + 3], V[V_YTMP],
                                        cbuf, scale, fs[F_NEWTON_TOL])
    iw[I_NFEV] += nf
    iw[I_NEWTON_IT] += nit
    if not conv:
        iw[I_NEWTON_FAIL] += 1
        if iw[I_JAC_CURRENT] == 0:
            new_jacobian(kernel, p, regs, t, y, fs, iw, V, J, jv, pol)
            return False  # retry with a fresh Jacobian, same h
        iw[I_LU_VALID] = 0
        reject(fs, iw, h, 0.5, FAIL_NONFINITE if rate < 0.0 else FAIL_NEWTON)
        return False
    ynew = V[V_YNEW]
    refine = iw[I_FIRST] == 1 or iw[I_LAST_REJECTED] == 1
    err, nf = radau_iia_5.error(kernel, p, regs, t, y, V[V_F0], h, LU, piv, Z, ynew,
                           V[V_ERR], V[V_YTMP], atol, rtol, refine)
    iw[I_NFEV] += nf
    if not (err < np.inf):
        iw[I_LU_VALID] = 0
        reject(fs, iw, h, 0.25, FAIL_NONFINITE)
        return False
    if err <= 1.0 and iw[I_NONNEG] and nonneg_check(ynew, y, atol, rtol, V[V_NNMASK]) == 2:
        iw[I_NONNEG_REJECTS] += 1
        iw[I_LU_VALID] = 0
        reject(fs, iw, h, 0.5, FAIL_ERROR)
        return False
    if err > 1.0:
        fac = radau_iia_5.step_factor(h, fs[F_H_OLD], err, fs[F_ERR_OLD], nit, False)
        iw[I_LU_VALID] = 0
        reject(fs, iw, h, fac, FAIL_ERROR)
        return False
    recompute_jac = nit > 2 and rate > 1e-3
    fac = radau_iia_5.step_factor(h, fs[F_H_OLD], err, fs[F_ERR_OLD], nit, True)
    if iw[I_LAST_REJECTED] == 1:
        fac = min(fac, 1.0)
    if not recompute_jac and fac < 1.2 and fac >= 1.0:
        fac = 1.0  # keep h, so the LU factors stay valid
    else:
        iw[I_LU_VALID] = 0
    fs[F_H_OLD] = h
    fs[F_ERR_OLD] = err
    radau_iia_5.prepare_dense(y, Z, cont)
    fs[F_H] = h * fac
    iw[I_JAC_CURRENT] = -2 if recompute_jac else 0  # -2: refresh after the step
    return True


@njit(cache=True, nogil=True, _nrt=False)
def try_rosenbrock_4(kernel, p, regs, y, atol, fs, iw, V, cont, J, jv, LU, piv, pol, h):
    t = fs[F_T]
    rtol = fs[F_RTOL]
    n = y.shape[0]
    f0 = V[V_F0]
    fdt = V[V_FDT]
    if iw[I_JAC_CURRENT] != 1:
        new_jacobian(kernel, p, regs, t, y, fs, iw, V, J, jv, pol)
        if iw[I_HAS_TIME]:
            dt = np.sqrt(EPS) * max(abs(t), h)
            vm.rhs(kernel, t + dt, y, p, regs, fdt)
            iw[I_NFEV] += 1
            for i in range(n):
                fdt[i] = (fdt[i] - f0[i]) / dt
        else:
            fdt[:] = 0.0
    if iw[I_LU_VALID] == 0 or fs[F_H_LU] != h:
        iw[I_NLU] += 1
        if not rosenbrock_4.factor(J, h, LU, piv):
            iw[I_LU_VALID] = 0
            reject(fs, iw, h, 0.5, FAIL_SINGULAR)
            return False
        iw[I_LU_VALID] = 1
        fs[F_H_LU] = h
    K = V[V_K:V_K + 6]
    ynew = V[V_YNEW]
    err, nf = rosenbrock_4.attempt(kernel, p, regs, t, y, f0, fdt, h, LU, piv, K, ynew,
                            V[V_YTMP], V[V_ERR], atol, rtol)
    iw[I_NFEV] += nf
    if not (err < np.inf):
        reject(fs, iw, h, 0.2, FAIL_NONFINITE)
        return False
    if err <= 1.0 and iw[I_NONNEG] and nonneg_check(ynew, y, atol, rtol, V[V_NNMASK]) == 2:
        iw[I_NONNEG_REJECTS] += 1
        reject(fs, iw, h, 0.5, FAIL_ERROR)
        return False
    first = iw[I_FIRST] == 1
    if err > 1.0:
        fac = rosenbrock_4.step_factor(h, fs[F_H_OLD], err, fs[F_ERR_OLD], False, first)
        reject(fs, iw, h, fac, FAIL_ERROR)
        return False
    fac = rosenbrock_4.step_factor(h, fs[F_H_OLD], err, fs[F_ERR_OLD], True, first)
    if iw[I_LAST_REJECTED] == 1:
        fac = min(fac, 1.0)
    fs[F_H_OLD] = h
    fs[F_ERR_OLD] = max(0.01, err)
    rosenbrock_4.prepare_dense(y, ynew, K, cont)
    fs[F_H] = h * fac
    iw[I_JAC_CURRENT] = 0  # a Rosenbrock step needs J at its own start point
    return True
