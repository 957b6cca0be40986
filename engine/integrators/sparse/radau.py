"""Radau IIA of order 5 for large sparse systems (SuperLU).

The Python twin of the compiled dense step (engine.integrators.steps.try_radau_iia_5 with
engine.integrators.radau_iia_5): Hairer & Wanner II, sec. IV.8. Simplified Newton iterations on
the transformed collocation system need one real factorisation of
(MU_REAL/h) I - J and one complex of ((MU_RE + i MU_IM)/h) I - J; both are
SuperLU factors on the Jacobian's pattern (engine.integrators.sparse.core.Pattern, the complex
one with the real one's fill-reducing ordering). J and the factors are reused
as in the dense code: h is kept when the step factor is in [1, 1.2) and Newton
converged well, and J is re-evaluated after a step whose Newton iteration was
slow (more than two iterations at a contraction rate above 1e-3) or when
Newton fails with an older J.

The step loop is Python; the residuals, the increments, the error estimate's
vectors, the predictor, the interpolant, the step controller, outputs and
events are compiled (the latter four shared with the dense path).
"""
from __future__ import annotations

import math

import numpy as np
from numba import njit

from engine.integrators import radau_iia_5, state as S
from engine.kernels import vm
from engine.integrators.driver import _finish
from engine.integrators.errors_norm import err_norm
from engine.integrators.sparse.core import explicit_cheaper, new_jacobian, next_step, to_explicit
from engine.integrators.steps import nonneg_check, reject
from engine.integrators.tableaux import (RA_C, RA_E, RA_MU_IM, RA_MU_RE, RA_MU_REAL, RA_T, RA_TI,
                             RADAU_IIA)

NEWTON_MAXITER = radau_iia_5.NEWTON_MAXITER
# Rows of the real work array ``run.radau_work`` (one per sparse run).
W_D = 0      # 0..2: Newton increments of the transformed variables (natural order)
W_B = 3      # right-hand side of the real system (the factor's order)
N_WORK = 4
KEEP_H_BELOW = 1.2  # keep h (and the factors) when the step factor is in [1, this)


@njit(cache=True, nogil=True, _nrt=False)
def _transform(Z, W):
    """W = TI Z (transformed stage increments)."""
    for s in range(3):
        for i in range(Z.shape[1]):
            W[s, i] = RA_TI[s, 0] * Z[0, i] + RA_TI[s, 1] * Z[1, i] + RA_TI[s, 2] * Z[2, i]


@njit(cache=True, nogil=True, _nrt=False)
def _residual(kernel, p, regs, t, y, h, Z, F, ytmp, W, br, bc, inv_r, inv_c):
    """Stage derivatives F, then the right-hand sides of the real and the complex
    system, each in its factor's order. False if f is not finite."""
    n = y.shape[0]
    for s in range(3):
        for i in range(n):
            ytmp[i] = y[i] + Z[s, i]
        vm.rhs(kernel, t + RA_C[s] * h, ytmp, p, regs, F[s])
        for i in range(n):
            if not math.isfinite(F[s, i]):
                return False
    mr = RA_MU_REAL / h
    mc = complex(RA_MU_RE, RA_MU_IM) / h
    for i in range(n):
        k = inv_r[i]
        br[i] = (RA_TI[0, 0] * F[0, k] + RA_TI[0, 1] * F[1, k] + RA_TI[0, 2] * F[2, k]
                 - mr * W[0, k])
    for i in range(n):
        k = inv_c[i]
        f1 = RA_TI[1, 0] * F[0, k] + RA_TI[1, 1] * F[1, k] + RA_TI[1, 2] * F[2, k]
        f2 = RA_TI[2, 0] * F[0, k] + RA_TI[2, 1] * F[1, k] + RA_TI[2, 2] * F[2, k]
        bc[i] = complex(f1, f2) - mc * complex(W[1, k], W[2, k])
    return True


@njit(cache=True, nogil=True, _nrt=False)
def _increment(xr, xc, perm_r, perm_c, scale, D):
    """D = the solutions in natural order; returns their scaled RMS norm."""
    n = D.shape[1]
    acc = 0.0
    for j in range(n):
        a = xr[perm_r[j]]
        c = xc[perm_c[j]]
        D[0, j] = a
        D[1, j] = c.real
        D[2, j] = c.imag
        sc = scale[j]
        acc += (a / sc) ** 2 + (c.real / sc) ** 2 + (c.imag / sc) ** 2
    return math.sqrt(acc / (3 * max(n, 1)))


@njit(cache=True, nogil=True, _nrt=False)
def _apply(D, W, Z):
    """W += D; Z = T W."""
    for s in range(3):
        for i in range(W.shape[1]):
            W[s, i] += D[s, i]
    for s in range(3):
        for i in range(W.shape[1]):
            Z[s, i] = RA_T[s, 0] * W[0, i] + RA_T[s, 1] * W[1, i] + RA_T[s, 2] * W[2, i]


@njit(cache=True, nogil=True, _nrt=False)
def _error_rhs(y, f0, Z, h, ynew, ze, b, inv):
    """ynew = y + Z_3; ze = (e . Z) / h; b = f0 + ze in the real factor's order."""
    n = y.shape[0]
    for i in range(n):
        ynew[i] = y[i] + Z[2, i]
        ze[i] = (RA_E[0] * Z[0, i] + RA_E[1] * Z[1, i] + RA_E[2] * Z[2, i]) / h
    for i in range(n):
        k = inv[i]
        b[i] = f0[k] + ze[k]


@njit(cache=True, nogil=True, _nrt=False)
def _error_out(x, perm, y, ynew, atol, rtol, e):
    """e = x in natural order; returns its error norm."""
    for j in range(e.shape[0]):
        e[j] = x[perm[j]]
    return err_norm(e, y, ynew, atol, rtol)


@njit(cache=True, nogil=True, _nrt=False)
def _refine_rhs(y, e, ze, f, b, inv):
    """b = f + ze in the real factor's order (f = f(t, y + e), the extra filtering)."""
    for i in range(y.shape[0]):
        k = inv[i]
        b[i] = f[k] + ze[k]


@njit(cache=True, nogil=True, _nrt=False)
def _scale(y, atol, rtol, scale):
    for i in range(y.shape[0]):
        scale[i] = atol[i] + rtol * abs(y[i])


def _jacobian(kernel, run, pattern, t, y):
    new_jacobian(kernel, run, pattern, t, y)
    run.iw[S.I_LU_VALID] = 0


def _newton(kernel, run, t, h, scale, tol):
    """Simplified Newton on the collocation system (radau_iia_5.newton with sparse
    solves). Returns (converged, iterations, rate; -1 when f is not finite)."""
    V, y, p, regs = run.V, run.y, run.p, run.regs
    lr, lc = run.sparse_lu, run.sparse_luc
    Z, W, F, ytmp = V[S.V_Z:S.V_Z + 3], V[S.V_W:S.V_W + 3], V[S.V_F:S.V_F + 3], V[S.V_YTMP]
    D, br, bc = run.radau_work[W_D:W_D + 3], run.radau_work[W_B], run.radau_c
    _transform(Z, W)
    dw_old = -1.0
    rate = 1.0
    iw = run.iw
    for k in range(NEWTON_MAXITER):
        iw[S.I_NFEV] += 3
        if not _residual(kernel, p, regs, t, y, h, Z, F, ytmp, W, br, bc, lr.inv, lc.inv):
            return False, k + 1, -1.0
        dw = _increment(lr.lu.solve(br), lc.lu.solve(bc), lr.perm, lc.perm, scale, D)
        if dw_old > 0.0:
            rate = dw / dw_old
            if radau_iia_5.too_slow(rate, k, dw, tol):
                return False, k + 1, rate
        _apply(D, W, Z)
        if dw == 0.0 or (dw_old > 0.0 and rate / (1.0 - rate) * dw < tol):
            return True, k + 1, rate
        dw_old = dw
    return False, NEWTON_MAXITER, rate


def _error(kernel, run, t, h, refine):
    """Embedded error estimate filtered through the real factor (radau_iia_5.error);
    ``refine`` filters once more after a rejection or on the first step."""
    V, y, lu = run.V, run.y, run.sparse_lu
    ynew, ze, e, b = V[S.V_YNEW], V[S.V_YTMP], V[S.V_ERR], run.radau_work[W_B]
    rtol = run.fs[S.F_RTOL]
    _error_rhs(y, V[S.V_F0], V[S.V_Z:S.V_Z + 3], h, ynew, ze, b, lu.inv)
    err = _error_out(lu.lu.solve(b), lu.perm, y, ynew, run.atol, rtol, e)
    if refine and err > 1.0:
        e += y
        f = run.radau_work[W_D]
        vm.rhs(kernel, t, e, run.p, run.regs, f)
        run.iw[S.I_NFEV] += 1
        _refine_rhs(y, e, ze, f, b, lu.inv)
        err = _error_out(lu.lu.solve(b), lu.perm, y, ynew, run.atol, rtol, e)
    return err


def _reject(run, h, fac, kind):
    reject(run.fs, run.iw, h, fac, kind)
    return False


def step(kernel, run, pattern, h):
    """Attempt one step of size h (engine.integrators.steps.try_radau_iia_5); book it when
    accepted. Returns True when accepted."""
    fs, iw, V = run.fs, run.iw, run.V
    t = fs[S.F_T]
    rtol = fs[S.F_RTOL]
    if iw[S.I_JAC_CURRENT] < 0:
        _jacobian(kernel, run, pattern, t, run.y)
    if iw[S.I_LU_VALID] == 0 or fs[S.F_H_LU] != h:
        iw[S.I_NLU] += 1
        try:
            run.sparse_lu = pattern.factor(run.jv, RA_MU_REAL / h)
            run.sparse_luc = pattern.factor_complex(run.jv, complex(RA_MU_RE, RA_MU_IM) / h)
        except RuntimeError:  # exactly singular
            iw[S.I_LU_VALID] = 0
            return _reject(run, h, 0.5, S.FAIL_SINGULAR)
        iw[S.I_LU_VALID] = 1
        fs[S.F_H_LU] = h
    scale = V[S.V_SCALE]
    _scale(run.y, run.atol, rtol, scale)
    Z = V[S.V_Z:S.V_Z + 3]
    radau_iia_5.predict(run.cont, iw[S.I_HAVE_CONT] == 1 and iw[S.I_CONT_METHOD] == RADAU_IIA,
                   fs[S.F_T_OLD], fs[S.F_H_LAST], t, h, run.y, Z)
    conv, nit, rate = _newton(kernel, run, t, h, scale, fs[S.F_NEWTON_TOL])
    iw[S.I_NEWTON_IT] += nit
    if not conv:
        iw[S.I_NEWTON_FAIL] += 1
        if iw[S.I_JAC_CURRENT] == 0:
            _jacobian(kernel, run, pattern, t, run.y)
            return False  # retry with a fresh Jacobian, same h
        iw[S.I_LU_VALID] = 0
        return _reject(run, h, 0.5, S.FAIL_NONFINITE if rate < 0.0 else S.FAIL_NEWTON)
    err = _error(kernel, run, t, h, iw[S.I_FIRST] == 1 or iw[S.I_LAST_REJECTED] == 1)
    if not err < np.inf:
        iw[S.I_LU_VALID] = 0
        return _reject(run, h, 0.25, S.FAIL_NONFINITE)
    ynew = V[S.V_YNEW]
    if err <= 1.0 and iw[S.I_NONNEG] and \
            nonneg_check(ynew, run.y, run.atol, rtol, V[S.V_NNMASK]) == 2:
        iw[S.I_NONNEG_REJECTS] += 1
        iw[S.I_LU_VALID] = 0
        return _reject(run, h, 0.5, S.FAIL_ERROR)
    if err > 1.0:
        fac = radau_iia_5.step_factor(h, fs[S.F_H_OLD], err, fs[S.F_ERR_OLD], nit, False)
        iw[S.I_LU_VALID] = 0
        return _reject(run, h, fac, S.FAIL_ERROR)
    recompute_jac = nit > 2 and rate > 1e-3
    fac = radau_iia_5.step_factor(h, fs[S.F_H_OLD], err, fs[S.F_ERR_OLD], nit, True)
    if iw[S.I_LAST_REJECTED] == 1:
        fac = min(fac, 1.0)
    if not recompute_jac and 1.0 <= fac < KEEP_H_BELOW:
        fac = 1.0  # keep h, so the factors stay valid
    else:
        iw[S.I_LU_VALID] = 0
    fs[S.F_H_OLD] = h
    fs[S.F_ERR_OLD] = err
    radau_iia_5.prepare_dense(run.y, Z, run.cont)
    fs[S.F_H] = h * fac
    # -1: a new Jacobian at the start of the next step (the dense path's -2)
    iw[S.I_JAC_CURRENT] = -1 if recompute_jac else 0
    if _finish(kernel, run.p, run.regs, run.y, run.atol, fs, iw, V, run.cont, run.pol,
               run.t_out, run.y_out, run.gv, run.ev_dir, run.ev_term, run.ev_t, run.ev_i,
               run.ev_y, run.hist, h):
        return True
    vm.rhs(kernel, fs[S.F_T], run.y, run.p, run.regs, V[S.V_F0])
    iw[S.I_NFEV] += 1
    return True


def advance(kernel, run, pattern, budget):
    """Python twin of engine.integrators.driver.advance for the sparse Radau IIA path."""
    iw = run.iw
    steps = 0
    while iw[S.I_STATUS] == S.RUNNING:
        h = next_step(run, steps, budget)
        if h is None:
            break
        steps += 1
        if step(kernel, run, pattern, h) and iw[S.I_PINNED] < 0 \
                and iw[S.I_STATUS] == S.RUNNING and explicit_cheaper(run, h):
            to_explicit(kernel, run)
            break
