"""The compiled step loop shared by all methods.

The driver owns the loop, the counters, the outcome and the bookkeeping of
accepted steps (events, outputs, step history); each method module supplies
only its step attempt, its interpolant and its step-size controller. The loop
runs at most ``budget`` steps and then returns, so Python can report progress,
honour cancellation and wall-time limits, and resume with the same arrays. It
also returns right after a method switch when ``iw[I_SWITCH_RETURNS]`` asks for it
(so time per method can be measured, and the sparse path can take over).
"""
import numpy as np
from numba import njit

from engine.integrators import dormand_prince_54, radau_iia_5, rosenbrock_4, switching
from engine.kernels import vm
from engine.integrators.errors_norm import initial_step
from engine.integrators.linalg import copy
from engine.integrators.events import dense_eval, scan
from engine.integrators.state import (DONE, FAIL_NEWTON, FAIL_NONFINITE, FAIL_SINGULAR, F_ERR_OLD,
                          F_EXPL_NEEDED, F_H, F_H_JCHECK, F_H_LAST, F_H_OLD, F_HEXP, F_HMAX,
                          F_RATE, F_RHO, F_RHO_J, F_RTOL, F_T, F_T_OLD, F_TEND, I_ACCEPTED,
                          I_CONT_METHOD, I_FAIL_KIND, I_FIRST, I_HAVE_CONT, I_HIST_N,
                          I_HIST_STRIDE, I_IOUT, I_JAC_CURRENT, I_LAST_REJECTED, I_LU_VALID,
                          I_MAX_STEPS, I_METHOD, I_NEV_LOG, I_NFEV, I_NJEV, I_NONNEG,
                          I_NSWITCH, I_PINNED, I_REJECTED, I_RETURN, I_STATUS,
                          I_SWITCH_RETURNS, I_STEPS_DORMAND_PRINCE, I_STEPS_IN_METHOD, I_STIFF_POS,
                          I_TERMINAL, RUNNING,
                          ST_NEWTON_FAILURE, ST_NON_FINITE, ST_STEP_LIMIT, ST_STEP_UNDERFLOW,
                          V_ERR, V_F0, V_K, V_NNMASK, V_PV, V_PW, V_YEV, V_YNEW, V_YTMP)
from engine.integrators.steps import new_jacobian, nonneg_check, try_dormand_prince_54, try_radau_iia_5, try_rosenbrock_4
from engine.integrators.switching import (P_BOUNDARY, P_POWER_ITERS, P_UNSTABLE,
                              REASON_EXPLICIT_CHEAPER, REASON_STIFF, REASON_UNSTABLE)
from engine.integrators.tableaux import DORMAND_PRINCE, RADAU_IIA, ROSENBROCK

EPS = 2.220446049250313e-16
JAC_CHECK_EVERY = 20  # auto mode: accepted explicit steps between Jacobian checks


@njit(cache=True, nogil=True, _nrt=False)
def start(kernel, p, regs, y, atol, fs, iw, V, gv, order):
    """f(t0, y0), event values at t0 and the starting step (if fs[F_H] <= 0).

    Returns False when f(t0, y0) is not finite."""
    t = fs[F_T]
    f0 = V[V_F0]
    vm.rhs(kernel, t, y, p, regs, f0)
    iw[I_NFEV] += 1
    for i in range(y.shape[0]):
        if not np.isfinite(f0[i]) or not np.isfinite(y[i]):
            return False
    copy(f0, V[V_K])
    if gv.shape[1] > 0:
        vm.events(kernel, t, y, p, regs, gv[0])
    if fs[F_H] <= 0.0:
        fs[F_H] = initial_step(kernel, p, regs, t, y, f0, atol, fs[F_RTOL], order,
                               min(fs[F_HMAX], fs[F_TEND] - t), V[V_YTMP], V[V_ERR])
        iw[I_NFEV] += 1
    return True


@njit(cache=True, nogil=True, _nrt=False)
def _history(hist, iw, t, h, method, h_exp):
    """Keep at most hist.shape[0] rows, thinning by two when full (none: no history)."""
    if hist.shape[0] == 0:
        return
    if iw[I_ACCEPTED] % iw[I_HIST_STRIDE] != 0:
        return
    k = iw[I_HIST_N]
    if k == hist.shape[0]:
        half = k // 2
        for j in range(half):
            copy(hist[2 * j + 1], hist[j])
        iw[I_HIST_N] = half
        iw[I_HIST_STRIDE] *= 2
        k = half
        if iw[I_ACCEPTED] % iw[I_HIST_STRIDE] != 0:
            return
    hist[k, 0] = t
    hist[k, 1] = h
    hist[k, 2] = method
    hist[k, 3] = h_exp if h_exp < np.inf else -1.0
    iw[I_HIST_N] = k + 1


@njit(cache=True, nogil=True, _nrt=True)
def _scan(kernel, p, regs, method, cont, t_old, h, ynew, gv, ev_dir, ev_term, ev_t, ev_i,
          ev_y, counts, ytmp):
    """engine.integrators.events.scan, compiled with the runtime's allocator (it may need it);
    the functions around it run without (see engine.kernels.vm)."""
    return scan(kernel, p, regs, method, cont, t_old, h, ynew, gv, ev_dir, ev_term, ev_t,
                ev_i, ev_y, counts, ytmp)


@njit(cache=True, nogil=True, _nrt=True)
def _dense_any(method, cont, t_old, h, t, out):
    """engine.integrators.events.dense_eval (all methods, BDF of the sparse path included)."""
    dense_eval(method, cont, t_old, h, t, out)


@njit(cache=True, nogil=True, _nrt=False)
def _dense(method, cont, t_old, h, t, out):
    """State at time t from the interpolant of the step (t_old, t_old + h)."""
    if method == DORMAND_PRINCE:
        dormand_prince_54.dense(cont, (t - t_old) / h, out)
    elif method == RADAU_IIA:
        radau_iia_5.dense(cont, (t - t_old) / h, out)
    elif method == ROSENBROCK:
        rosenbrock_4.dense(cont, (t - t_old) / h, out)
    else:
        _dense_any(method, cont, t_old, h, t, out)


@njit(cache=True, nogil=True, _nrt=False)
def _finish(kernel, p, regs, y, atol, fs, iw, V, cont, pol, t_out, y_out, gv, ev_dir,
            ev_term, ev_t, ev_i, ev_y, hist, h):
    """Book an accepted step (y still the old state, V[V_YNEW] the new one).

    Returns True when a terminal event stopped the run."""
    method = iw[I_METHOD]
    t_old = fs[F_T]
    t_new = t_old + h
    ynew = V[V_YNEW]
    m = t_out.shape[0]
    if method == DORMAND_PRINCE and (gv.shape[1] > 0 or (iw[I_IOUT] < m and t_out[iw[I_IOUT]] < t_new)):
        # Dormand-Prince's interpolant (five rows from the stages) only for steps that
        # hold an output time or may hold an event: most explicit steps need none
        dormand_prince_54.prepare_dense(y, ynew, h, V[V_K:V_K + 7], cont)
    if iw[I_NONNEG] and nonneg_check(ynew, y, atol, fs[F_RTOL], V[V_NNMASK]) == 1:
        for i in range(y.shape[0]):
            if ynew[i] < 0.0 and V[V_NNMASK, i] != 0.0:
                ynew[i] = 0.0
    t_stop, k_stop = t_new, -1
    if gv.shape[1] > 0:  # a call with many array arguments costs even when it returns at once
        t_stop, k_stop = _scan(kernel, p, regs, method, cont, t_old, h, ynew, gv, ev_dir,
                               ev_term, ev_t, ev_i, ev_y, iw[I_NEV_LOG:I_NEV_LOG + 2],
                               V[V_YEV])
    k = iw[I_IOUT]
    while k < m and t_out[k] <= t_stop:
        if t_out[k] == t_new:
            copy(ynew, y_out[k])
        else:
            _dense(method, cont, t_old, h, t_out[k], y_out[k])
            if iw[I_NONNEG]:  # the interpolant may dip below zero between points
                for i in range(y.shape[0]):
                    if y_out[k, i] < 0.0 and V[V_NNMASK, i] != 0.0:
                        y_out[k, i] = 0.0
        k += 1
    iw[I_IOUT] = k
    iw[I_ACCEPTED] += 1
    iw[I_STEPS_DORMAND_PRINCE + method] += 1
    iw[I_STEPS_IN_METHOD] += 1
    iw[I_LAST_REJECTED] = 0
    iw[I_FIRST] = 0
    iw[I_HAVE_CONT] = 1
    iw[I_CONT_METHOD] = method
    if fs[F_RHO] > 0.0:
        fs[F_EXPL_NEEDED] += h * fs[F_RHO] / pol[P_BOUNDARY]
    _history(hist, iw, t_new, h, method, fs[F_HEXP])
    fs[F_T_OLD] = t_old
    fs[F_H_LAST] = h
    if k_stop >= 0:
        copy(V[V_YEV], y)
        fs[F_T] = t_stop
        iw[I_TERMINAL] = k_stop + 1
        iw[I_STATUS] = DONE
        return True
    copy(ynew, y)
    fs[F_T] = t_new
    return False


@njit(cache=True, nogil=True, _nrt=False)
def _unstable(kernel, p, regs, y, fs, iw, V, J, jv, pol, h):
    """Confirm a large stage estimate of h*rho with the Jacobian at the step start."""
    if jv.shape[0] == 0 or J.shape[0] != y.shape[0]:
        return False
    vm.jac_dense(kernel, fs[F_T], y, p, regs, jv, J)
    iw[I_NJEV] += 1
    rho = switching.spectral_radius(J, V[V_PV], V[V_PW], int(pol[P_POWER_ITERS]))
    fs[F_RHO_J] = rho
    if h * rho > pol[P_BOUNDARY]:
        fs[F_RHO] = rho
        fs[F_HEXP] = pol[P_BOUNDARY] / rho
        return True
    return False


@njit(cache=True, nogil=True, _nrt=False)
def _switch(fs, iw, swlog, to, reason):
    """Change method; reset the controller memory; ask Python for a return (unless the
    run keeps going through switches: engine.integrators.state.I_SWITCH_RETURNS)."""
    iw[I_NSWITCH] = switching.log_switch(swlog, iw[I_NSWITCH], fs[F_T], iw[I_METHOD], to,
                                         fs[F_H_LAST], fs[F_RHO], fs[F_HEXP], reason)
    iw[I_METHOD] = to
    iw[I_STEPS_IN_METHOD] = 0
    iw[I_STIFF_POS] = 0
    iw[I_STIFF_POS + 1] = 0
    iw[I_FIRST] = 1
    iw[I_LU_VALID] = 0
    iw[I_JAC_CURRENT] = -1
    fs[F_RHO_J] = 0.0
    fs[F_ERR_OLD] = 1e-4 if to == DORMAND_PRINCE else 0.0
    fs[F_H_OLD] = 0.0
    iw[I_RETURN] = iw[I_SWITCH_RETURNS]


@njit(cache=True, nogil=True, _nrt=False)
def _after(kernel, p, regs, y, fs, iw, V, J, jv, pol, swlog):
    """Work after an accepted step: f at the new point, Jacobian refresh,
    and the switching decision in automatic mode."""
    method = iw[I_METHOD]
    t = fs[F_T]
    f0 = V[V_F0]
    if method == DORMAND_PRINCE:
        if iw[I_NONNEG]:
            vm.rhs(kernel, t, y, p, regs, f0)  # state may have been clipped
            iw[I_NFEV] += 1
        else:
            copy(V[V_K + 6], f0)
        copy(f0, V[V_K])
    else:
        vm.rhs(kernel, t, y, p, regs, f0)
        iw[I_NFEV] += 1
        if iw[I_JAC_CURRENT] == -2:
            new_jacobian(kernel, p, regs, t, y, fs, iw, V, J, jv, pol)
    if iw[I_PINNED] >= 0:
        return
    counters = iw[I_STIFF_POS:I_STIFF_POS + 2]
    if method == DORMAND_PRINCE and jv.shape[0] > 0 and J.shape[0] == y.shape[0] \
            and (iw[I_STEPS_IN_METHOD] % JAC_CHECK_EVERY == 1
                 or fs[F_H_LAST] > 2.0 * fs[F_H_JCHECK]):
        # The stage estimate of rho sees a fast mode only once it has grown
        # back; a periodic Jacobian-based estimate finds it at once. It is
        # refreshed when the step has doubled since (it may be stale).
        vm.jac_dense(kernel, t, y, p, regs, jv, J)
        iw[I_NJEV] += 1
        fs[F_H_JCHECK] = fs[F_H_LAST]
        fs[F_RHO_J] = switching.spectral_radius(J, V[V_PV], V[V_PW],
                                                int(pol[P_POWER_ITERS]))
    if method == DORMAND_PRINCE:
        if switching.explicit_says_stiff(pol, counters, fs[F_H_LAST], fs[F_RHO],
                                         iw[I_STEPS_IN_METHOD]):
            _switch(fs, iw, swlog, switching.implicit_choice(pol, fs[F_RTOL]),
                    REASON_STIFF)
    else:
        if switching.implicit_says_nonstiff(pol, counters, fs[F_H_LAST], fs[F_RHO],
                                            iw[I_STEPS_IN_METHOD]):
            _switch(fs, iw, swlog, DORMAND_PRINCE, REASON_EXPLICIT_CHEAPER)
            fs[F_H] = min(fs[F_H], 0.5 * fs[F_HEXP])
            copy(f0, V[V_K])  # first-same-as-last stage of the explicit method


@njit(cache=True, nogil=True, _nrt=False)
def advance(kernel, p, regs, y, atol, pol, fs, iw, V, cont, J, jv, LU, piv, LUc, pivc,
            cbuf, t_out, y_out, gv, ev_dir, ev_term, ev_t, ev_i, ev_y, swlog, hist,
            budget):
    """Run up to ``budget`` steps (or to the end, a failure, or a switch)."""
    m = t_out.shape[0]
    steps = 0
    while iw[I_STATUS] == RUNNING:
        t = fs[F_T]
        k = iw[I_IOUT]
        while k < m and t_out[k] <= t:
            copy(y, y_out[k])
            k += 1
        iw[I_IOUT] = k
        tend = fs[F_TEND]
        if t >= tend:
            iw[I_STATUS] = DONE
            break
        if iw[I_RETURN] == 1:
            iw[I_RETURN] = 0
            return
        if steps >= budget:
            return
        if iw[I_ACCEPTED] + iw[I_REJECTED] >= iw[I_MAX_STEPS]:
            iw[I_STATUS] = ST_STEP_LIMIT
            break
        h = min(fs[F_H], fs[F_HMAX])
        if t + 1.01 * h >= tend:
            h = tend - t
        if h < 16.0 * EPS * abs(t) or not (h > 0.0):
            kind = iw[I_FAIL_KIND]
            if kind == FAIL_NONFINITE:
                iw[I_STATUS] = ST_NON_FINITE
            elif kind == FAIL_NEWTON or kind == FAIL_SINGULAR:
                iw[I_STATUS] = ST_NEWTON_FAILURE
            else:
                iw[I_STATUS] = ST_STEP_UNDERFLOW
            break
        steps += 1
        method = iw[I_METHOD]
        if method == DORMAND_PRINCE:
            ok = try_dormand_prince_54(kernel, p, regs, y, atol, fs, iw, V, cont, pol, h)
            if iw[I_PINNED] < 0 and h * fs[F_RATE] > pol[P_UNSTABLE] * pol[P_BOUNDARY] \
                    and _unstable(kernel, p, regs, y, fs, iw, V, J, jv, pol, h):
                # Far outside the stability region: the step amplifies the fast
                # modes; discard it and go implicit at once.
                if ok:
                    ok = False
                    iw[I_REJECTED] += 1
                fs[F_H_LAST] = h
                _switch(fs, iw, swlog, switching.implicit_choice(pol, fs[F_RTOL]),
                        REASON_UNSTABLE)
                fs[F_H] = h
        elif method == RADAU_IIA:
            ok = try_radau_iia_5(kernel, p, regs, y, atol, fs, iw, V, cont, J, jv, LU, piv,
                             LUc, pivc, cbuf, pol, h)
        else:
            ok = try_rosenbrock_4(kernel, p, regs, y, atol, fs, iw, V, cont, J, jv, LU, piv,
                            pol, h)
        if ok:
            if _finish(kernel, p, regs, y, atol, fs, iw, V, cont, pol, t_out, y_out, gv,
                       ev_dir, ev_term, ev_t, ev_i, ev_y, hist, h):
                break
            _after(kernel, p, regs, y, fs, iw, V, J, jv, pol, swlog)
