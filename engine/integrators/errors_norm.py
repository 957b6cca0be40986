"""Mixed error norm and automatic initial step.

err = RMS_i( e_i / (atol_i + rtol * max(|y_i|, |ynew_i|)) ); a step is accepted
when err <= 1 (Hairer, Norsett & Wanner I, sec. II.4, eq. (4.10)-(4.11)).
"""
import math

from numba import njit

from engine.kernels import vm


@njit(cache=True, nogil=True, _nrt=False)
def err_norm(e, y, ynew, atol, rtol):
    """RMS of e / (atol + rtol * max(|y|, |ynew|)); NaN propagates."""
    n = e.shape[0]
    s = 0.0
    for i in range(n):
        sk = atol[i] + rtol * max(abs(y[i]), abs(ynew[i]))
        v = e[i] / sk
        s += v * v
    return math.sqrt(s / max(n, 1))


@njit(cache=True, nogil=True, _nrt=False)
def err_norm_scaled(e, scale):
    """RMS of e / scale."""
    n = e.shape[0]
    s = 0.0
    for i in range(n):
        v = e[i] / scale[i]
        s += v * v
    return math.sqrt(s / max(n, 1))


@njit(cache=True, nogil=True, _nrt=False)
def initial_step(kernel, p, regs, t, y, f0, atol, rtol, order, hmax, y1, f1):
    """Starting step of Hairer, Norsett & Wanner I, sec. II.4 (p. 169).

    Uses one extra right-hand-side evaluation (written to ``f1``).
    """
    n = y.shape[0]
    dnf = 0.0
    dny = 0.0
    for i in range(n):
        sk = atol[i] + rtol * abs(y[i])
        dnf += (f0[i] / sk) ** 2
        dny += (y[i] / sk) ** 2
    dnf /= max(n, 1)
    dny /= max(n, 1)
    if dnf <= 1e-10 or dny <= 1e-10:
        h = 1e-6
    else:
        h = 0.01 * math.sqrt(dny / dnf)
    h = min(h, hmax)
    for i in range(n):
        y1[i] = y[i] + h * f0[i]
    vm.rhs(kernel, t + h, y1, p, regs, f1)
    der2 = 0.0
    for i in range(n):
        sk = atol[i] + rtol * abs(y[i])
        der2 += ((f1[i] - f0[i]) / sk) ** 2
    # h is 0 when |f0| overflowed the norm: the run then starts small and ends non_finite
    der2 = math.sqrt(der2 / max(n, 1)) / h if h > 0.0 else math.inf
    der12 = max(abs(der2), math.sqrt(dnf))
    if not (der12 > 1e-15):
        h1 = max(1e-6, h * 1e-3)
    else:
        h1 = (0.01 / der12) ** (1.0 / order)
    h = min(100.0 * h, h1, hmax)
    if not (h > 0.0):
        h = 1e-6
    return h
