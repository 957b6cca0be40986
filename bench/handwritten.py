"""Right-hand sides and Jacobians written by hand in plain numpy, as a SciPy user would.

These feed the ``solve_ivp/*`` peers. Each pair mirrors one model in
bench/problems.py; tests/bench checks that they agree with the engine's kernel.
"""
from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from bench import brusselator as B


def robertson_f(t, y):
    y1, y2, y3 = y
    return np.array([-0.04 * y1 + 1e4 * y2 * y3,
                     0.04 * y1 - 1e4 * y2 * y3 - 3e7 * y2 * y2,
                     3e7 * y2 * y2])


def robertson_j(t, y):
    y1, y2, y3 = y
    return np.array([[-0.04, 1e4 * y3, 1e4 * y2],
                     [0.04, -1e4 * y3 - 6e7 * y2, -1e4 * y2],
                     [0.0, 6e7 * y2, 0.0]])


def hires_f(t, y):
    y1, y2, y3, y4, y5, y6, y7, y8 = y
    r = 280.0 * y6 * y8
    return np.array([-1.71 * y1 + 0.43 * y2 + 8.32 * y3 + 0.0007,
                     1.71 * y1 - 8.75 * y2,
                     -10.03 * y3 + 0.43 * y4 + 0.035 * y5,
                     8.32 * y2 + 1.71 * y3 - 1.12 * y4,
                     -1.745 * y5 + 0.43 * y6 + 0.43 * y7,
                     -r + 0.69 * y4 + 1.71 * y5 - 0.43 * y6 + 0.69 * y7,
                     r - 1.81 * y7,
                     -r + 1.81 * y7])


def hires_j(t, y):
    J = np.zeros((8, 8))
    J[0, 0], J[0, 1], J[0, 2] = -1.71, 0.43, 8.32
    J[1, 0], J[1, 1] = 1.71, -8.75
    J[2, 2], J[2, 3], J[2, 4] = -10.03, 0.43, 0.035
    J[3, 1], J[3, 2], J[3, 3] = 8.32, 1.71, -1.12
    J[4, 4], J[4, 5], J[4, 6] = -1.745, 0.43, 0.43
    J[5, 3], J[5, 4], J[5, 5], J[5, 6], J[5, 7] = 0.69, 1.71, -0.43 - 280.0 * y[7], 0.69, -280.0 * y[5]
    J[6, 5], J[6, 6], J[6, 7] = 280.0 * y[7], -1.81, 280.0 * y[5]
    J[7, 5], J[7, 6], J[7, 7] = -280.0 * y[7], 1.81, -280.0 * y[5]
    return J


EPS_VDP = 1e-6


def vanderpol_f(t, y):
    return np.array([y[1], ((1.0 - y[0] ** 2) * y[1] - y[0]) / EPS_VDP])


def vanderpol_j(t, y):
    return np.array([[0.0, 1.0],
                     [(-2.0 * y[0] * y[1] - 1.0) / EPS_VDP, (1.0 - y[0] ** 2) / EPS_VDP]])


MU_A = 0.012277471


def arenstorf_f(t, y):
    y1, y2, v1, v2 = y
    me = 1.0 - MU_A
    d1 = ((y1 + MU_A) ** 2 + y2 ** 2) ** 1.5
    d2 = ((y1 - me) ** 2 + y2 ** 2) ** 1.5
    return np.array([v1, v2,
                     y1 + 2 * v2 - me * (y1 + MU_A) / d1 - MU_A * (y1 - me) / d2,
                     y2 - 2 * v1 - me * y2 / d1 - MU_A * y2 / d2])


def lorenz_f(t, y):
    x, yy, z = y
    return np.array([10.0 * (yy - x), x * (28.0 - z) - yy, x * yy - 8.0 / 3.0 * z])


def ramp_f(t, y):
    a, b, c = y
    k = 10.0 ** t
    return np.array([-a + 0.1 * c, a - k * b, k * b - 0.1 * c])


def ramp_j(t, y):
    k = 10.0 ** t
    return np.array([[-1.0, 0.0, 0.1], [1.0, -k, 0.0], [0.0, k, -0.1]])


def bruss_functions(n: int):
    """(f, jac) for the n x n Brusselator; jac returns a scipy.sparse CSC matrix."""
    diff = B.ALPHA * n * n
    src = 5.0 * B.source_mask(n)
    m = n * n
    pattern = B.sparsity(n).tocoo()
    lap = sp.csr_matrix(pattern.tocsr()[:m, :m])
    lap.setdiag(-4.0)
    lap = (diff * lap).tocsr()

    def lap_of(w):
        return diff * (np.roll(w, 1, 0) + np.roll(w, -1, 0) + np.roll(w, 1, 1)
                       + np.roll(w, -1, 1) - 4.0 * w)

    def f(t, y):
        u = y[:m].reshape(n, n)
        v = y[m:].reshape(n, n)
        uuv = u * u * v
        du = 1.0 + uuv - 4.4 * u + lap_of(u) + (src if t >= B.T_SOURCE else 0.0)
        dv = 3.4 * u - uuv + lap_of(v)
        return np.concatenate([du.ravel(), dv.ravel()])

    def jac(t, y):
        u, v = y[:m], y[m:]
        return sp.bmat([[lap + sp.diags(2 * u * v - 4.4), sp.diags(u * u)],
                        [sp.diags(3.4 - 2 * u * v), lap - sp.diags(u * u)]],
                       format="csc")

    return f, jac
