"""Variable-order BDF (orders 1-5, NDF form) for large sparse systems.

The numerical differentiation formulas of Shampine & Reichelt (1997, SIAM J.
Sci. Comput. 18:1-22), in the modified-divided-difference form of the BDF
codes (Byrne & Hindmarsh 1975): the array D holds backward differences of the
solution on an equidistant grid and is rescaled when the step changes.

Linear algebra: one sparse LU of I - c J (scipy.sparse.linalg.splu, see
``engine.integrators.sparse.core``) serves many steps and Newton iterations. The factors are
kept while (1 + c rho) / (1 + c_LU rho) stays within LU_RATIO (rho: spectral
radius of J), and corrections made with a stale c_LU are scaled by
2 / (1 + that ratio), as in the BDF codes. The Jacobian is re-evaluated when
Newton fails with older factors, and every JAC_AGE steps.

Newton stops at the BDF codes' tolerance, a tenth of the error test's scale
(Hindmarsh et al., ACM TOMS 31 (2005) 363-396, sec. 2.1), with its contraction
rate remembered across steps, so most steps take one iteration. Steps grow by
at least GROWTH_MIN; repeated error-test failures drop the order.

Chosen for the sparse path by measurement: on the 2-D Brusselator (2048
states) it needs far fewer factorisations than Rosenbrock 4(3). The step loop is
Python; vector work, the interpolant, outputs and events are compiled (the
latter shared with the dense path).
"""
from __future__ import annotations

import math

import numpy as np
from numba import njit

from engine.integrators import state as S
from engine.kernels import vm
from engine.integrators.driver import _finish
from engine.integrators.errors_norm import err_norm_scaled
from engine.integrators.sparse.core import explicit_cheaper, new_jacobian, next_step, to_explicit
from engine.integrators.steps import reject
from engine.integrators.state import (F_H, F_RTOL, I_EQUAL_STEPS, I_JAC_CURRENT, I_NONNEG,
                          I_NONNEG_REJECTS, V_NNMASK, V_YNEW)

MAX_ORDER = 5
NEWTON_MAXITER = 4
# Newton stops when the estimated remaining correction is below NEWTON_COEF of
# the local-error test's scale, i.e. NEWTON_COEF / ERROR_CONST[order] in the
# scaled norm of d (Hindmarsh et al., ACM TOMS 31 (2005) 363-396, sec. 2.1).
NEWTON_COEF = 0.1
SAFETY = 0.8        # on the step-size factor from the error estimate
GROWTH = 10.0       # largest step increase ...
GROWTH_FIRST = 1e4  # ... except at the first decision (the starting step is tiny)
GROWTH_MIN = 1.5    # smaller increases are not taken (each may cost a factorisation)
NEF_ORDER1 = 3      # error-test failures in a row that restart at order 1
CRDOWN = 0.3        # decay of the remembered Newton contraction rate
JAC_AGE = 50        # accepted steps after which the Jacobian is re-evaluated
LU_RATIO = 1.5      # factors kept while _stale_ratio is in [1/LU_RATIO, LU_RATIO]
KAPPA = np.array([0.0, -0.1850, -1 / 9, -0.0823, -0.0415, 0.0])
GAMMA = np.hstack((0.0, np.cumsum(1.0 / np.arange(1, MAX_ORDER + 1))))
ALPHA = (1.0 - KAPPA) * GAMMA
ERROR_CONST = KAPPA * GAMMA + 1.0 / np.arange(1, MAX_ORDER + 2)


@njit(cache=True, nogil=True, _nrt=False)
def _R_into(order, factor, M):
    """M[:order+1, :order+1] = the difference-rescaling matrix R(factor)."""
    for j in range(order + 1):
        M[0, j] = 1.0
    for i in range(1, order + 1):
        for j in range(order + 1):
            M[i, j] = M[i - 1, j] * ((i - 1 - factor * j) / i if j > 0 else 0.0)


@njit(cache=True, nogil=True, _nrt=False)
def _change_D(D, order, factor, R, U, RU, tmp):
    _R_into(order, factor, R)
    _R_into(order, 1.0, U)
    k = order + 1
    for i in range(k):
        for j in range(k):
            acc = 0.0
            for m in range(k):
                acc += R[i, m] * U[m, j]
            RU[i, j] = acc
    n = D.shape[1]
    for j in range(k):
        for col in range(n):
            tmp[j, col] = 0.0
        for i in range(k):
            a = RU[i, j]
            for col in range(n):
                tmp[j, col] += a * D[i, col]
    for j in range(k):
        for col in range(n):
            D[j, col] = tmp[j, col]


def change_D(D, order, factor, scratch):
    """Rescale the difference array for a step-size change by ``factor``
    (D[:order+1] <- (R(factor) R(1))^T D[:order+1]); ``scratch`` has at least
    order + 1 rows of D's length."""
    sc = np.empty((3, MAX_ORDER + 1, MAX_ORDER + 1))
    _change_D(D, order, float(factor), sc[0], sc[1], sc[2], scratch)


def init(run, h):
    D = run.D
    D[:] = 0.0
    D[0] = run.y
    D[1] = run.V[S.V_F0] * h
    run.iw[S.I_ORDER] = 1
    run.iw[S.I_EQUAL_STEPS] = 0


# Rows of the work array ``run.bdf_work`` (one per sparse run).
W_Y, W_D, W_PRED, W_PSI, W_SCALE, W_B = range(6)


@njit(cache=True, nogil=True, _nrt=False)
def _predict(D, order, gamma, alpha, atol, rtol, W):
    """Predictor, psi and error scale of a step; Newton starts from d = 0."""
    n = D.shape[1]
    for i in range(n):
        s = D[0, i]
        p = 0.0
        for j in range(1, order + 1):
            s += D[j, i]
            p += gamma[j] * D[j, i]
        W[W_PRED, i] = s
        W[W_Y, i] = s
        W[W_D, i] = 0.0
        W[W_PSI, i] = p / alpha
        W[W_SCALE, i] = atol[i] + rtol * abs(s)


@njit(cache=True, nogil=True, _nrt=False)
def _residual(kernel, t, p, regs, f, c, W, inv):
    """f = f(t, y); b = c f - psi - d in the factor's (permuted) order; False if
    f is not finite."""
    vm.rhs(kernel, t, W[W_Y], p, regs, f)
    b = W[W_B]
    for i in range(b.shape[0]):
        k = inv[i]
        fk = f[k]
        if not math.isfinite(fk):
            return False
        b[i] = c * fk - W[W_PSI, k] - W[W_D, k]
    return True


@njit(cache=True, nogil=True, _nrt=False)
def _correct(z, perm, s, W):
    """y += s z, d += s z (z in the factor's order); returns the RMS of s z / scale."""
    acc = 0.0
    n = W.shape[1]
    for j in range(n):
        dz = s * z[perm[j]]
        W[W_Y, j] += dz
        W[W_D, j] += dz
        v = dz / W[W_SCALE, j]
        acc += v * v
    return math.sqrt(acc / max(n, 1))


@njit(cache=True, nogil=True, _nrt=False)
def _error(W, atol, rtol, ec):
    """Error norm of ec * d against the scale at the new solution (scale updated)."""
    acc = 0.0
    n = W.shape[1]
    for j in range(n):
        sc = atol[j] + rtol * abs(W[W_Y, j])
        W[W_SCALE, j] = sc
        v = ec * W[W_D, j] / sc
        acc += v * v
    return math.sqrt(acc / max(n, 1))


@njit(cache=True, nogil=True, _nrt=False)
def _accept(D, order, W, ynew, cont):
    """Update the differences with the converged correction d; copy y and D[:order+1]."""
    n = D.shape[1]
    for j in range(n):
        dj = W[W_D, j]
        D[order + 2, j] = dj - D[order + 1, j]
        D[order + 1, j] = dj
    for i in range(order, -1, -1):
        for j in range(n):
            D[i, j] += D[i + 1, j]
    for j in range(n):
        ynew[j] = W[W_Y, j]
    for i in range(cont.shape[0]):
        if i <= order:
            for j in range(n):
                cont[i, j] = D[i, j]
        else:
            for j in range(n):
                cont[i, j] = 0.0


def _stale_ratio(c, c_lu, rho):
    """Largest ratio (1 + c mu) / (1 + c_LU mu) over the eigenvalues -mu of a
    dissipative J with |mu| <= rho: how far the factored I - c_LU J is from the
    wanted I - c J. It is c / c_LU for very stiff steps, and near 1 while c rho
    and c_LU rho are small (non-stiff steps need no new factors)."""
    if not rho > 0.0 or rho == np.inf:
        return c / c_lu
    return (1.0 + c * rho) / (1.0 + c_lu * rho)


C_ACCEPTED, C_TERMINAL, C_ERROR, C_NEGATIVE, C_NONFINITE = range(5)


@njit(cache=True, nogil=True, _nrt=False)
def _conclude(kernel, p, regs, y, atol, fs, iw, V, cont, pol, t_out, y_out, gv, ev_dir,
              ev_term, ev_t, ev_i, ev_y, hist, h, D, order, W, ec):
    """Error test of a converged step; when it passes (and no state that must
    stay non-negative is below -scale) update the differences and book the
    step. Returns (error norm, C_* code)."""
    err = _error(W, atol, fs[F_RTOL], ec)
    if not err < np.inf:
        return err, C_NONFINITE
    if err > 1.0:
        return err, C_ERROR
    if iw[I_NONNEG]:
        for j in range(W.shape[1]):
            if V[V_NNMASK, j] != 0.0 and W[W_Y, j] < -W[W_SCALE, j]:
                iw[I_NONNEG_REJECTS] += 1
                return err, C_NEGATIVE
    iw[I_JAC_CURRENT] = 0
    _accept(D, order, W, V[V_YNEW], cont)
    iw[I_EQUAL_STEPS] += 1
    fs[F_H] = h
    if _finish(kernel, p, regs, y, atol, fs, iw, V, cont, pol, t_out, y_out, gv, ev_dir,
               ev_term, ev_t, ev_i, ev_y, hist, h):
        return err, C_TERMINAL
    return err, C_ACCEPTED


def _newton(kernel, run, fac, t_new, c, W, tol):
    """Simplified Newton on d with the factors of I - c_LU J.

    Convergence test of the BDF codes (Hindmarsh et al. 2005, sec. 2.1): stop
    when the correction times the estimated contraction rate (kept across
    steps) is below ``tol``; a correction made with a stale c_LU is scaled by
    2 / (1 + r), r = _stale_ratio. Returns (converged, iterations, non-finite f)."""
    f, iw, p, regs = run.V[S.V_YTMP], run.iw, run.p, run.regs
    lu, perm, inv = fac.lu, fac.perm, fac.inv
    ratio = _stale_ratio(c, run.fs[S.F_H_LU], run.fs[S.F_RHO])
    s = 2.0 / (1.0 + ratio) if ratio != 1.0 else 1.0
    # the stale c_LU alone limits the contraction to |r - 1| / (r + 1)
    crate = max(run.bdf_crate, abs(ratio - 1.0) / (ratio + 1.0))
    old = 0.0
    for k in range(NEWTON_MAXITER):
        iw[S.I_NFEV] += 1
        if not _residual(kernel, t_new, p, regs, f, c, W, inv):
            return False, k + 1, True
        dn = _correct(lu.solve(W[W_B]), perm, s, W)
        if k > 0:
            rate = dn / old
            crate = max(CRDOWN * crate, rate)
            if rate >= 1.0 or rate ** (NEWTON_MAXITER - k) / (1.0 - rate) * dn > tol:
                run.bdf_crate = crate
                return False, k + 1, False
        if dn * min(1.0, crate) <= tol:
            run.bdf_crate = crate
            return True, k + 1, False
        old = dn
    run.bdf_crate = crate
    return False, NEWTON_MAXITER, False


def _jacobian(kernel, run, pattern, t, y):
    new_jacobian(kernel, run, pattern, t, y)
    run.bdf_jac_step = run.iw[S.I_ACCEPTED]


def step(kernel, run, pattern, h):
    """Attempt one step of size h (already clipped to the span).

    Returns True when accepted (and booked), False when rejected."""
    fs, iw, D, W = run.fs, run.iw, run.D, run.bdf_work
    order = int(iw[S.I_ORDER])
    t = fs[S.F_T]
    t_new = t + h
    rtol = fs[S.F_RTOL]
    _predict(D, order, GAMMA, ALPHA[order], run.atol, rtol, W)
    c = h / ALPHA[order]
    if iw[S.I_ACCEPTED] - run.bdf_jac_step >= JAC_AGE and iw[S.I_JAC_CURRENT] != 1:
        # Refresh an old Jacobian even while Newton converges (its spectral
        # radius decides when factors may be kept); the factors are kept until
        # c moves or Newton struggles.
        _jacobian(kernel, run, pattern, t_new, W[W_PRED])
    while True:
        # Keep the factors while the stale ratio r stays within LU_RATIO: with
        # the corrections scaled by 2 / (1 + r) Newton still contracts by
        # |r - 1| / (r + 1) <= 0.2 on stiff and non-stiff components alike, and
        # factorisations dominate the cost.
        r = _stale_ratio(c, fs[S.F_H_LU], fs[S.F_RHO]) if iw[S.I_LU_VALID] else 0.0
        if not (1.0 / LU_RATIO <= r <= LU_RATIO):
            iw[S.I_NLU] += 1
            try:
                run.sparse_lu = pattern.factor(run.jv, 1.0, c)
            except RuntimeError:
                return _reject(run, h, 0.5, S.FAIL_SINGULAR, order)
            iw[S.I_LU_VALID] = 1
            fs[S.F_H_LU] = c
            run.bdf_lu_njev = iw[S.I_NJEV]
            run.bdf_crate = 1.0
        ok, nit, nonfinite = _newton(kernel, run, run.sparse_lu, t_new, c, W,
                                     NEWTON_COEF / ERROR_CONST[order])
        iw[S.I_NEWTON_IT] += nit
        if ok:
            break
        iw[S.I_NEWTON_FAIL] += 1
        if nonfinite or (iw[S.I_JAC_CURRENT] == 1 and run.bdf_lu_njev == iw[S.I_NJEV]):
            return _reject(run, h, 0.5, S.FAIL_NONFINITE if nonfinite else S.FAIL_NEWTON,
                           order)
        if iw[S.I_JAC_CURRENT] != 1:
            _jacobian(kernel, run, pattern, t_new, W[W_PRED])
        iw[S.I_LU_VALID] = 0
        W[W_Y] = W[W_PRED]
        W[W_D] = 0.0
    safety = SAFETY
    err, code = _conclude(kernel, run.p, run.regs, run.y, run.atol, fs, iw, run.V, run.cont,
                          run.pol, run.t_out, run.y_out, run.gv, run.ev_dir, run.ev_term,
                          run.ev_t, run.ev_i, run.ev_y, run.hist, h, D, order, W,
                          ERROR_CONST[order])
    if code == C_NONFINITE:
        return _reject(run, h, 0.25, S.FAIL_NONFINITE, order)
    if code == C_ERROR:
        return _reject_error(run, h, order, err, safety)
    if code == C_NEGATIVE:
        return _reject(run, h, 0.5, S.FAIL_ERROR, order)
    run.bdf_nef = 0
    if code == C_TERMINAL or iw[S.I_EQUAL_STEPS] < order + 1:
        return True
    _choose_order(run, order, err, safety, W[W_SCALE])
    return True


def _choose_order(run, order, err, safety, scale):
    """Order and step after order+1 equal steps (Shampine & Reichelt 1997)."""
    D, iw, fs = run.D, run.iw, run.fs
    # step factors for orders order-1, order, order+1 (error ~ h^(k+1))
    fm = fp = 0.0
    if order > 1:
        em = ERROR_CONST[order - 1] * err_norm_scaled(D[order], scale)
        fm = em ** (-1.0 / order) if em > 0 else math.inf
    if order < MAX_ORDER:
        ep = ERROR_CONST[order + 1] * err_norm_scaled(D[order + 2], scale)
        fp = ep ** (-1.0 / (order + 2)) if ep > 0 else math.inf
    f0 = err ** (-1.0 / (order + 1)) if err > 0 else math.inf
    first = iw[S.I_ACCEPTED] == order + 1 and iw[S.I_REJECTED] == 0
    change, best = -1, fm  # the largest factor wins; ties go to the lower order
    if f0 > best:
        change, best = 0, f0
    if fp > best:
        change, best = 1, fp
    order += change
    iw[S.I_ORDER] = order
    factor = safety * best
    if change == 0 and 1.0 <= factor < GROWTH_MIN:
        factor = 1.0
    factor = min(GROWTH_FIRST if first else GROWTH, factor)
    fs[S.F_H] *= factor
    change_D(D, order, factor, run.bdf_work)
    iw[S.I_EQUAL_STEPS] = 0


@njit(cache=True, nogil=True, _nrt=False)
def _norm_sum(a, b, scale):
    """RMS of (a + b) / scale."""
    acc = 0.0
    n = a.shape[0]
    for j in range(n):
        v = (a[j] + b[j]) / scale[j]
        acc += v * v
    return math.sqrt(acc / max(n, 1))


def _reject_error(run, h, order, err, safety):
    """Error-test failure: shrink the step, and drop the order when order - 1
    promises a larger step (Shampine & Reichelt 1997) or after repeated failures
    (the solution is not smooth there, e.g. a switched source)."""
    run.bdf_nef += 1
    factor = safety * err ** (-1.0 / (order + 1))
    if order > 1:
        W = run.bdf_work
        em = ERROR_CONST[order - 1] * _norm_sum(run.D[order], W[W_D], W[W_SCALE])
        fm = safety * em ** (-1.0 / order) if em > 0 else 10.0
        if run.bdf_nef >= NEF_ORDER1:
            run.iw[S.I_ORDER] = 1
            factor = min(factor, fm)
        elif fm > factor:
            run.iw[S.I_ORDER] = order - 1
            factor = min(fm, 0.9)
    if run.bdf_nef >= 2:
        factor = min(factor, 0.5)
    return _reject(run, h, max(0.1 if run.bdf_nef >= 2 else 0.2, factor), S.FAIL_ERROR,
                   order)


def _reject(run, h, factor, kind, order):
    iw = run.iw
    reject(run.fs, iw, h, factor, kind)
    change_D(run.D, order, factor, run.bdf_work)
    iw[S.I_EQUAL_STEPS] = 0
    if kind != S.FAIL_ERROR:  # after an error-test failure the factors still serve
        iw[S.I_LU_VALID] = 0
    return False


def advance(kernel, run, pattern, budget):
    """Python twin of engine.integrators.driver.advance for the sparse BDF path."""
    fs, iw = run.fs, run.iw
    if getattr(run, "bdf_work", None) is None:
        run.bdf_work = np.zeros((6, run.D.shape[1]))  # rows W_Y .. W_B
        run.bdf_crate = 1.0   # Newton contraction rate, kept across steps
        run.bdf_nef = 0       # error-test failures in a row
        run.bdf_lu_njev = -1  # Jacobian evaluation the factors were made with
        run.bdf_jac_step = 0  # accepted steps at the last Jacobian evaluation
    done = iw[S.I_ACCEPTED] + iw[S.I_REJECTED]
    if getattr(run, "bdf_seen", -1) != done:
        # First call, or another method stepped since the last one (auto enters
        # BDF when the problem turns stiff): start again at order 1 from y.
        if done > 0:
            vm.rhs(kernel, fs[S.F_T], run.y, run.p, run.regs, run.V[S.V_F0])
            iw[S.I_NFEV] += 1
        init(run, fs[S.F_H])
        _jacobian(kernel, run, pattern, fs[S.F_T], run.y)
        iw[S.I_LU_VALID] = 0
        run.bdf_crate = 1.0
        run.bdf_nef = 0
    steps = 0
    while iw[S.I_STATUS] == S.RUNNING:
        h = next_step(run, steps, budget)
        if h is None:
            break
        h_d = fs[S.F_H]
        if h != h_d:  # keep D scaled for the step about to be taken
            change_D(run.D, int(iw[S.I_ORDER]), h / h_d, run.bdf_work)
            fs[S.F_H] = h
            iw[S.I_EQUAL_STEPS] = 0
        steps += 1
        if step(kernel, run, pattern, h) and iw[S.I_PINNED] < 0 \
                and iw[S.I_STATUS] == S.RUNNING and explicit_cheaper(run, h):
            to_explicit(kernel, run)
            break
    run.bdf_seen = iw[S.I_ACCEPTED] + iw[S.I_REJECTED]
