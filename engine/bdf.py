"""Variable-order BDF (orders 1-5, NDF form) for large sparse systems.

The numerical differentiation formulas of Shampine & Reichelt (1997, SIAM J.
Sci. Comput. 18:1-22), in the modified-divided-difference form of the BDF
codes (Byrne & Hindmarsh 1975): the array D holds backward differences of the
solution on an equidistant grid and is rescaled when the step changes. One
sparse LU of I - c J (scipy.sparse.linalg.splu, see ``engine.sparse``) serves
many steps and Newton iterations; the Jacobian is re-evaluated only when
Newton converges badly. Chosen for the sparse path by measurement: on the 2-D
Brusselator (2048 states) it needs far fewer factorisations than Rodas4.
The step loop is Python; the interpolant, outputs and events use the compiled
helpers shared with the dense path.
"""
from __future__ import annotations

import numpy as np

from engine import state as S, vm
from engine.driver import EPS, _finish
from engine.errors_norm import err_norm_scaled
from engine.switching import P_BOUNDARY

MAX_ORDER = 5
NEWTON_MAXITER = 4
LU_REUSE = 0.3  # relative change of c tolerated before refactoring
KAPPA = np.array([0.0, -0.1850, -1 / 9, -0.0823, -0.0415, 0.0])
GAMMA = np.hstack((0.0, np.cumsum(1.0 / np.arange(1, MAX_ORDER + 1))))
ALPHA = (1.0 - KAPPA) * GAMMA
ERROR_CONST = KAPPA * GAMMA + 1.0 / np.arange(1, MAX_ORDER + 2)


def _R(order, factor):
    i = np.arange(1, order + 1)[:, None]
    j = np.arange(1, order + 1)
    M = np.zeros((order + 1, order + 1))
    M[1:, 1:] = (i - 1 - factor * j) / i
    M[0] = 1.0
    return np.cumprod(M, axis=0)


def change_D(D, order, factor):
    """Rescale the difference array for a step-size change by ``factor``."""
    RU = _R(order, factor) @ _R(order, 1.0)
    D[:order + 1] = RU.T @ D[:order + 1]


def init(run, h):
    D = run.D
    D[:] = 0.0
    D[0] = run.y
    D[1] = run.V[S.V_F0] * h
    run.iw[S.I_ORDER] = 1
    run.iw[S.I_EQUAL_STEPS] = 0


def _newton(kernel, run, lu, t_new, y_pred, c, psi, scale):
    tol = run.fs[S.F_NEWTON_TOL]
    f = run.V[S.V_YTMP]
    y = y_pred.copy()
    d = np.zeros_like(y)
    old = None
    for k in range(NEWTON_MAXITER):
        vm.rhs(kernel, t_new, y, run.p, run.regs, f)
        run.iw[S.I_NFEV] += 1
        if not np.all(np.isfinite(f)):
            return False, k + 1, y, d, True
        dy = lu.solve(c * f - psi - d)
        dn = err_norm_scaled(dy, scale)
        rate = None if old is None else dn / old
        if rate is not None and (rate >= 1 or rate ** (NEWTON_MAXITER - k) / (1 - rate) * dn > tol):
            return False, k + 1, y, d, False
        y += dy
        d += dy
        if dn == 0 or (rate is not None and rate / (1 - rate) * dn < tol):
            return True, k + 1, y, d, False
        old = dn
    return False, NEWTON_MAXITER, y, d, False


def _jacobian(kernel, run, pattern, t, y):
    vm.jac_values(kernel, t, y, run.p, run.regs, run.jv)
    run.iw[S.I_NJEV] += 1
    run.iw[S.I_JAC_CURRENT] = 1
    rho = pattern.spectral_radius(run.jv, run.V[S.V_PV])
    run.fs[S.F_RHO] = rho
    run.fs[S.F_HEXP] = run.pol[P_BOUNDARY] / rho if rho > 0 else np.inf


def step(kernel, run, pattern, h):
    """Attempt one step of size h (already clipped to the span).

    Returns True when accepted (and booked), False when rejected."""
    fs, iw, D = run.fs, run.iw, run.D
    order = int(iw[S.I_ORDER])
    t = fs[S.F_T]
    t_new = t + h
    y_pred = D[:order + 1].sum(axis=0)
    scale = run.atol + fs[S.F_RTOL] * np.abs(y_pred)
    psi = (D[1:order + 1].T @ GAMMA[1:order + 1]) / ALPHA[order]
    c = h / ALPHA[order]
    while True:
        # Keep the factors while c = h / alpha stays within 30 % of the factored
        # value: Newton still converges, and factorisations dominate the cost.
        if not iw[S.I_LU_VALID] or abs(c / fs[S.F_H_LU] - 1.0) > LU_REUSE:
            iw[S.I_NLU] += 1
            try:
                run.sparse_lu = pattern.factor(run.jv * c, 1.0)
            except RuntimeError:
                return _reject(run, h, 0.5, S.FAIL_SINGULAR, order)
            iw[S.I_LU_VALID] = 1
            fs[S.F_H_LU] = c
        ok, nit, y_new, d, nonfinite = _newton(kernel, run, run.sparse_lu, t_new, y_pred, c,
                                               psi, scale)
        iw[S.I_NEWTON_IT] += nit
        if ok:
            break
        iw[S.I_NEWTON_FAIL] += 1
        if iw[S.I_JAC_CURRENT] == 1 or nonfinite:
            return _reject(run, h, 0.5, S.FAIL_NONFINITE if nonfinite else S.FAIL_NEWTON,
                           order)
        _jacobian(kernel, run, pattern, t_new, y_pred)
        iw[S.I_LU_VALID] = 0
    safety = 0.9 * (2 * NEWTON_MAXITER + 1) / (2 * NEWTON_MAXITER + nit)
    scale = run.atol + fs[S.F_RTOL] * np.abs(y_new)
    err = err_norm_scaled(ERROR_CONST[order] * d, scale)
    if not err < np.inf:
        return _reject(run, h, 0.25, S.FAIL_NONFINITE, order)
    if err > 1.0:
        return _reject(run, h, max(0.2, safety * err ** (-1.0 / (order + 1))), S.FAIL_ERROR,
                       order)
    if iw[S.I_NONNEG]:
        mask = run.V[S.V_NNMASK] != 0
        if np.any(mask & (y_new < -scale)):
            iw[S.I_NONNEG_REJECTS] += 1
            return _reject(run, h, 0.5, S.FAIL_ERROR, order)
    # accepted: update the differences
    iw[S.I_JAC_CURRENT] = 0
    D[order + 2] = d - D[order + 1]
    D[order + 1] = d
    for i in reversed(range(order + 1)):
        D[i] += D[i + 1]
    iw[S.I_EQUAL_STEPS] += 1
    run.V[S.V_YNEW] = y_new
    run.cont[:] = 0.0
    run.cont[:order + 1] = D[:order + 1]
    fs[S.F_H] = h
    if _finish(kernel, run.p, run.regs, run.y, run.atol, fs, iw, run.V, run.cont, run.pol,
               run.t_out, run.y_out, run.gv, run.ev_dir, run.ev_term, run.ev_t, run.ev_i,
               run.ev_y, run.hist, h):
        return True
    if iw[S.I_EQUAL_STEPS] < order + 1:
        return True
    _choose_order(run, order, err, safety, scale)
    return True


def _choose_order(run, order, err, safety, scale):
    """Order and step after order+1 equal steps (Shampine & Reichelt 1997)."""
    D, iw, fs = run.D, run.iw, run.fs
    em = err_norm_scaled(ERROR_CONST[order - 1] * D[order], scale) if order > 1 else np.inf
    ep = (err_norm_scaled(ERROR_CONST[order + 1] * D[order + 2], scale)
          if order < MAX_ORDER else np.inf)
    norms = np.array([em, err, ep])
    with np.errstate(divide="ignore"):
        factors = norms ** (-1.0 / np.arange(order, order + 3))
    order += int(np.argmax(factors)) - 1
    iw[S.I_ORDER] = order
    factor = min(10.0, safety * float(np.max(factors)))
    fs[S.F_H] *= factor
    change_D(D, order, factor)
    iw[S.I_EQUAL_STEPS] = 0


def _reject(run, h, factor, kind, order):
    iw, fs = run.iw, run.fs
    iw[S.I_REJECTED] += 1
    iw[S.I_LAST_REJECTED] = 1
    iw[S.I_FAIL_KIND] = kind
    if kind == S.FAIL_NONFINITE:
        fs[S.F_T_BAD] = fs[S.F_T] + h
    fs[S.F_H] = h * factor
    change_D(run.D, order, factor)
    iw[S.I_EQUAL_STEPS] = 0
    iw[S.I_LU_VALID] = 0
    return False


def advance(kernel, run, pattern, budget):
    """Python twin of engine.driver.advance for the sparse BDF path."""
    fs, iw = run.fs, run.iw
    m = len(run.t_out)
    if iw[S.I_ACCEPTED] + iw[S.I_REJECTED] == 0 and iw[S.I_NJEV] == 0:
        init(run, fs[S.F_H])
        _jacobian(kernel, run, pattern, fs[S.F_T], run.y)
    steps = 0
    while iw[S.I_STATUS] == S.RUNNING:
        t = fs[S.F_T]
        k = iw[S.I_IOUT]
        while k < m and run.t_out[k] <= t:
            run.y_out[k] = run.y
            k += 1
        iw[S.I_IOUT] = k
        tend = fs[S.F_TEND]
        if t >= tend:
            iw[S.I_STATUS] = S.DONE
            break
        if steps >= budget:
            break
        if iw[S.I_ACCEPTED] + iw[S.I_REJECTED] >= iw[S.I_MAX_STEPS]:
            iw[S.I_STATUS] = S.ST_STEP_LIMIT
            break
        h_d = fs[S.F_H]
        h = min(h_d, fs[S.F_HMAX])
        if t + 1.01 * h >= tend:
            h = tend - t
        if h < 16 * EPS * abs(t) or not h > 0:
            kind = iw[S.I_FAIL_KIND]
            iw[S.I_STATUS] = (S.ST_NON_FINITE if kind == S.FAIL_NONFINITE else
                              S.ST_NEWTON_FAILURE if kind in (S.FAIL_NEWTON, S.FAIL_SINGULAR)
                              else S.ST_STEP_UNDERFLOW)
            break
        if h != h_d:  # keep D scaled for the step about to be taken
            change_D(run.D, int(iw[S.I_ORDER]), h / h_d)
            fs[S.F_H] = h
            iw[S.I_EQUAL_STEPS] = 0
        steps += 1
        step(kernel, run, pattern, h)
