"""Event detection and location on the dense output.

After each accepted step the event functions g(t, y) of the model are
evaluated at the new point; a sign change in the requested direction
(+1 rising, -1 falling, 0 either) is located on the step's interpolant by the
Illinois variant of regula falsi with periodic bisection (Dahlquist & Bjorck,
Numerical Methods, sec. 6.2), to a few units of round-off in t.
"""
import numpy as np
from numba import njit

from engine.integrators import dormand_prince_54, radau_iia_5, rosenbrock_4
from engine.kernels import vm
from engine.integrators.tableaux import BDF, DORMAND_PRINCE, RADAU_IIA


@njit(cache=True, nogil=True)
def dense_eval(method, cont, t_old, h, t, out):
    """State at time t from the interpolant of the step (t_old, t_old + h)."""
    x = (t - t_old) / h
    if method == DORMAND_PRINCE:
        dormand_prince_54.dense(cont, x, out)
    elif method == RADAU_IIA:
        radau_iia_5.dense(cont, x, out)
    elif method == BDF:
        # Newton form through the last points (engine.integrators.sparse.bdf): rows beyond the
        # current order are zero.
        t_new = t_old + h
        out[:] = cont[0]
        prod = 1.0
        for j in range(1, cont.shape[0]):
            prod *= (t - (t_new - h * (j - 1))) / (h * j)
            for i in range(out.shape[0]):
                out[i] += cont[j, i] * prod
    else:
        rosenbrock_4.dense(cont, x, out)


@njit(cache=True, nogil=True)
def crossed(g_old, g_new, direction):
    if direction >= 0 and g_old < 0.0 and g_new >= 0.0:
        return True
    if direction <= 0 and g_old > 0.0 and g_new <= 0.0:
        return True
    return False


@njit(cache=True, nogil=True)
def locate(kernel, p, regs, k, method, cont, t_old, h, ga, gb, ytmp, gtmp):
    """Time of the sign change of event k inside (t_old, t_old + h]."""
    a = t_old
    b = t_old + h
    tol = 4.0 * 2.220446049250313e-16 * max(abs(a), abs(b), h)
    side = 0
    for it in range(200):
        if b - a <= tol:
            break
        if it % 4 == 3 or gb == ga:
            c = 0.5 * (a + b)
        else:
            c = (a * gb - b * ga) / (gb - ga)
            if not (a < c < b):
                c = 0.5 * (a + b)
        dense_eval(method, cont, t_old, h, c, ytmp)
        vm.events(kernel, c, ytmp, p, regs, gtmp)
        gc = gtmp[k]
        if gc == 0.0:
            return c
        if (gc > 0.0) == (gb > 0.0):
            b = c
            gb = gc
            if side == -1:
                ga *= 0.5
            side = -1
        else:
            a = c
            ga = gc
            if side == 1:
                gb *= 0.5
            side = 1
    return b


@njit(cache=True, nogil=True)
def scan(kernel, p, regs, method, cont, t_old, h, ynew, gv, ev_dir, ev_term,
         ev_t, ev_i, ev_y, counts, ytmp):
    """Check the step (t_old, t_old + h] for events; record them.

    ``gv`` rows: 0 = g at the step start, 1 = g at its end, 2 = scratch,
    3 = root times. ``counts`` = [recorded, seen]. Returns the time at which
    the run must stop (first terminal event) or t_old + h; the state at that
    time is written to ``ytmp`` when the step is cut.
    """
    ne = gv.shape[1]
    t_new = t_old + h
    if ne == 0:
        return t_new, -1
    vm.events(kernel, t_new, ynew, p, regs, gv[1])
    t_stop = t_new
    k_stop = -1
    any_hit = False
    for k in range(ne):
        gv[3, k] = np.inf
        if crossed(gv[0, k], gv[1, k], ev_dir[k]):
            any_hit = True
            gv[3, k] = locate(kernel, p, regs, k, method, cont, t_old, h,
                              gv[0, k], gv[1, k], ytmp, gv[2])
            if ev_term[k] and gv[3, k] < t_stop:
                t_stop = gv[3, k]
                k_stop = k
    if any_hit:
        # Record hits up to the stopping time, in time order.
        while True:
            best = -1
            for k in range(ne):
                if gv[3, k] <= t_stop and (best < 0 or gv[3, k] < gv[3, best]):
                    best = k
            if best < 0:
                break
            te = gv[3, best]
            gv[3, best] = np.inf
            m = counts[0]
            if m < ev_t.shape[0]:
                ev_t[m] = te
                ev_i[m] = best
                dense_eval(method, cont, t_old, h, te, ev_y[m])
                counts[0] = m + 1
            counts[1] += 1
    if k_stop >= 0:
        dense_eval(method, cont, t_old, h, t_stop, ytmp)
    for k in range(ne):
        gv[0, k] = gv[1, k]
    return t_stop, k_stop
