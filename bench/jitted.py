"""Hand-written numba right-hand sides and Jacobians for the compiled peers.

Signatures follow the peers' calling conventions, with parameters passed as one
float64 array ``p`` (``userdata`` for CVODE, ``args`` for odeint):

- ``<name>_rhs(t, y, out, p)`` and ``<name>_jac(t, y, J, p)`` fill arrays in place;
- ``<name>_cvrhs(t, y, yp, ud)`` and ``<name>_cvjac(t, y, yp, J, ud)`` are CVODE's, with
  ``ud = (p, ...)`` (scikit-sundae tests userdata for truth, so it cannot be a bare array);
- ``<name>_f(t, y, p)`` / ``<name>_df(t, y, p)`` return new arrays (odeint, tfirst=True).

Each wrapper calls its kernel as a module global (a jitted function passed as an
argument would defeat numba's disk cache).
"""
from __future__ import annotations

import numpy as np
from numba import njit

# --- Robertson (p = k1, k2, k3)


@njit(cache=True)
def robertson_rhs(t, y, out, p):
    out[0] = -p[0] * y[0] + p[2] * y[1] * y[2]
    out[1] = p[0] * y[0] - p[2] * y[1] * y[2] - p[1] * y[1] * y[1]
    out[2] = p[1] * y[1] * y[1]


@njit(cache=True)
def robertson_jac(t, y, J, p):
    J[0, 0] = -p[0]
    J[0, 1] = p[2] * y[2]
    J[0, 2] = p[2] * y[1]
    J[1, 0] = p[0]
    J[1, 1] = -p[2] * y[2] - 2.0 * p[1] * y[1]
    J[1, 2] = -p[2] * y[1]
    J[2, 0] = 0.0
    J[2, 1] = 2.0 * p[1] * y[1]
    J[2, 2] = 0.0


@njit(cache=True)
def robertson_cvrhs(t, y, yp, ud):
    robertson_rhs(t, y, yp, ud[0])


@njit(cache=True)
def robertson_cvjac(t, y, yp, J, ud):
    robertson_jac(t, y, J, ud[0])


@njit(cache=True)
def robertson_f(t, y, p):
    out = np.empty(3)
    robertson_rhs(t, y, out, p)
    return out


@njit(cache=True)
def robertson_df(t, y, p):
    J = np.empty((3, 3))
    robertson_jac(t, y, J, p)
    return J


# --- HIRES (p = k_fast)


@njit(cache=True)
def hires_rhs(t, y, out, p):
    r = p[0] * y[5] * y[7]
    out[0] = -1.71 * y[0] + 0.43 * y[1] + 8.32 * y[2] + 0.0007
    out[1] = 1.71 * y[0] - 8.75 * y[1]
    out[2] = -10.03 * y[2] + 0.43 * y[3] + 0.035 * y[4]
    out[3] = 8.32 * y[1] + 1.71 * y[2] - 1.12 * y[3]
    out[4] = -1.745 * y[4] + 0.43 * y[5] + 0.43 * y[6]
    out[5] = -r + 0.69 * y[3] + 1.71 * y[4] - 0.43 * y[5] + 0.69 * y[6]
    out[6] = r - 1.81 * y[6]
    out[7] = -r + 1.81 * y[6]


@njit(cache=True)
def hires_jac(t, y, J, p):
    J[:, :] = 0.0
    J[0, 0], J[0, 1], J[0, 2] = -1.71, 0.43, 8.32
    J[1, 0], J[1, 1] = 1.71, -8.75
    J[2, 2], J[2, 3], J[2, 4] = -10.03, 0.43, 0.035
    J[3, 1], J[3, 2], J[3, 3] = 8.32, 1.71, -1.12
    J[4, 4], J[4, 5], J[4, 6] = -1.745, 0.43, 0.43
    J[5, 3], J[5, 4], J[5, 6] = 0.69, 1.71, 0.69
    J[5, 5] = -0.43 - p[0] * y[7]
    J[5, 7] = -p[0] * y[5]
    J[6, 5], J[6, 6], J[6, 7] = p[0] * y[7], -1.81, p[0] * y[5]
    J[7, 5], J[7, 6], J[7, 7] = -p[0] * y[7], 1.81, -p[0] * y[5]


@njit(cache=True)
def hires_cvrhs(t, y, yp, ud):
    hires_rhs(t, y, yp, ud[0])


@njit(cache=True)
def hires_cvjac(t, y, yp, J, ud):
    hires_jac(t, y, J, ud[0])


@njit(cache=True)
def hires_f(t, y, p):
    out = np.empty(8)
    hires_rhs(t, y, out, p)
    return out


@njit(cache=True)
def hires_df(t, y, p):
    J = np.empty((8, 8))
    hires_jac(t, y, J, p)
    return J


# --- Van der Pol, scaled form (p = eps)


@njit(cache=True)
def vanderpol_rhs(t, y, out, p):
    out[0] = y[1]
    out[1] = ((1.0 - y[0] * y[0]) * y[1] - y[0]) / p[0]


@njit(cache=True)
def vanderpol_jac(t, y, J, p):
    J[0, 0] = 0.0
    J[0, 1] = 1.0
    J[1, 0] = (-2.0 * y[0] * y[1] - 1.0) / p[0]
    J[1, 1] = (1.0 - y[0] * y[0]) / p[0]


@njit(cache=True)
def vanderpol_cvrhs(t, y, yp, ud):
    vanderpol_rhs(t, y, yp, ud[0])


@njit(cache=True)
def vanderpol_cvjac(t, y, yp, J, ud):
    vanderpol_jac(t, y, J, ud[0])


@njit(cache=True)
def vanderpol_f(t, y, p):
    out = np.empty(2)
    vanderpol_rhs(t, y, out, p)
    return out


@njit(cache=True)
def vanderpol_df(t, y, p):
    J = np.empty((2, 2))
    vanderpol_jac(t, y, J, p)
    return J


# --- Arenstorf (p = mu); non-stiff, no Jacobian needed by the explicit peers


@njit(cache=True)
def arenstorf_rhs(t, y, out, p):
    mu = p[0]
    me = 1.0 - mu
    d1 = ((y[0] + mu) ** 2 + y[1] ** 2) ** 1.5
    d2 = ((y[0] - me) ** 2 + y[1] ** 2) ** 1.5
    out[0] = y[2]
    out[1] = y[3]
    out[2] = y[0] + 2.0 * y[3] - me * (y[0] + mu) / d1 - mu * (y[0] - me) / d2
    out[3] = y[1] - 2.0 * y[2] - me * y[1] / d1 - mu * y[1] / d2


@njit(cache=True)
def arenstorf_cvrhs(t, y, yp, ud):
    arenstorf_rhs(t, y, yp, ud[0])


@njit(cache=True)
def arenstorf_f(t, y, p):
    out = np.empty(4)
    arenstorf_rhs(t, y, out, p)
    return out


# --- Lorenz (p = sigma, rho, beta)


@njit(cache=True)
def lorenz_rhs(t, y, out, p):
    out[0] = p[0] * (y[1] - y[0])
    out[1] = y[0] * (p[1] - y[2]) - y[1]
    out[2] = y[0] * y[1] - p[2] * y[2]


@njit(cache=True)
def lorenz_cvrhs(t, y, yp, ud):
    lorenz_rhs(t, y, yp, ud[0])


@njit(cache=True)
def lorenz_f(t, y, p):
    out = np.empty(3)
    lorenz_rhs(t, y, out, p)
    return out


# --- Invented ramp (no parameters; k = 10^t)


@njit(cache=True)
def ramp_rhs(t, y, out, p):
    k = 10.0 ** t
    out[0] = -y[0] + 0.1 * y[2]
    out[1] = y[0] - k * y[1]
    out[2] = k * y[1] - 0.1 * y[2]


@njit(cache=True)
def ramp_jac(t, y, J, p):
    k = 10.0 ** t
    J[:, :] = 0.0
    J[0, 0], J[0, 2] = -1.0, 0.1
    J[1, 0], J[1, 1] = 1.0, -k
    J[2, 1], J[2, 2] = k, -0.1


@njit(cache=True)
def ramp_cvrhs(t, y, yp, ud):
    ramp_rhs(t, y, yp, ud[0])


@njit(cache=True)
def ramp_cvjac(t, y, yp, J, ud):
    ramp_jac(t, y, J, ud[0])


@njit(cache=True)
def ramp_f(t, y, p):
    out = np.empty(3)
    ramp_rhs(t, y, out, p)
    return out


@njit(cache=True)
def ramp_df(t, y, p):
    J = np.empty((3, 3))
    ramp_jac(t, y, J, p)
    return J


# --- 2-D Brusselator (p = n, diff, t_source, then n*n source values)


@njit(cache=True)
def bruss_rhs(t, y, out, p):
    n = int(p[0])
    diff = p[1]
    on = 1.0 if t >= p[2] else 0.0
    m = n * n
    for i in range(n):
        ip, im = (i + 1) % n, (i - 1) % n
        for j in range(n):
            jp, jm = (j + 1) % n, (j - 1) % n
            k = i * n + j
            u, v = y[k], y[m + k]
            lu = y[ip * n + j] + y[im * n + j] + y[i * n + jp] + y[i * n + jm] - 4.0 * u
            lv = (y[m + ip * n + j] + y[m + im * n + j] + y[m + i * n + jp]
                  + y[m + i * n + jm] - 4.0 * v)
            uuv = u * u * v
            out[k] = 1.0 + uuv - 4.4 * u + diff * lu + on * p[3 + k]
            out[m + k] = 3.4 * u - uuv + diff * lv


@njit(cache=True)
def bruss_entry(row, col, y, p):
    """One Jacobian entry d f_row / d y_col (zero outside the pattern)."""
    n = int(p[0])
    diff = p[1]
    m = n * n
    k = row % m
    u, v = y[k], y[m + k]
    same_block = (row < m) == (col < m)
    if same_block:
        if row == col:
            if row < m:
                return 2.0 * u * v - 4.4 - 4.0 * diff
            return -u * u - 4.0 * diff
        return diff
    if row < m:
        return u * u
    return 3.4 - 2.0 * u * v


@njit(cache=True)
def bruss_csc_values(y, p, colptr, rowind, out):
    for c in range(colptr.shape[0] - 1):
        for q in range(colptr[c], colptr[c + 1]):
            out[q] = bruss_entry(rowind[q], c, y, p)


@njit(cache=True)
def bruss_jac(t, y, J, p):
    """Dense Jacobian (for odeint); only sensible for small grids."""
    n = int(p[0])
    m = n * n
    J[:, :] = 0.0
    for i in range(n):
        ip, im = (i + 1) % n, (i - 1) % n
        for j in range(n):
            jp, jm = (j + 1) % n, (j - 1) % n
            k = i * n + j
            for nb in (ip * n + j, im * n + j, i * n + jp, i * n + jm):
                J[k, nb] += p[1]
                J[m + k, m + nb] += p[1]
            J[k, k] += bruss_entry(k, k, y, p)
            J[k, m + k] = bruss_entry(k, m + k, y, p)
            J[m + k, k] = bruss_entry(m + k, k, y, p)
            J[m + k, m + k] += bruss_entry(m + k, m + k, y, p)


@njit(cache=True)
def bruss_f(t, y, p):
    out = np.empty(y.shape[0])
    bruss_rhs(t, y, out, p)
    return out


@njit(cache=True)
def bruss_df(t, y, p):
    J = np.empty((y.shape[0], y.shape[0]))
    bruss_jac(t, y, J, p)
    return J


@njit(cache=True)
def bruss_cvrhs(t, y, yp, ud):
    bruss_rhs(t, y, yp, ud[0])


@njit(cache=True)
def bruss_cvjac(t, y, yp, JJ, ud):
    """CVODE sparse Jacobian: JJ holds the values in CSC order of the pattern."""
    bruss_csc_values(y, ud[0], ud[1], ud[2], JJ)
