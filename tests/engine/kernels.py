"""Test problems as engine kernels.

``linear_kernel`` builds the register programs of y' = A y by hand (it depends
only on engine.kernels.vm); the published nonlinear problems are written in the model
language and prepared with engine.model.prepare.
"""
from __future__ import annotations

import numpy as np

from engine.kernels import vm
from engine.model import prepare


def _code(ops):
    return np.array(ops, dtype=np.int32).reshape(-1, vm.N_FIELDS)


def linear_kernel(A: np.ndarray) -> vm.Kernel:
    """Hand-built kernel for y' = A y.

    Registers 0..n-1 hold the states, n the row accumulator, n+1 a constant.
    """
    A = np.asarray(A, dtype=float)
    n = A.shape[0]
    acc, c = n, n + 1
    rhs = [(vm.STATE, j, j, 0, 0) for j in range(n)]
    for i in range(n):
        rhs.append((vm.CONST, acc, i * n, 0, 0))
        rhs.append((vm.MUL, acc, acc, 0, 0))            # acc = A[i,0] * y_0
        for j in range(1, n):
            rhs.append((vm.CONST, c, i * n + j, 0, 0))
            rhs.append((vm.MULADD, acc, c, j, acc))     # acc += A[i,j] * y_j
        rhs.append((vm.OUT, i, acc, 0, 0))
    jac, rows, cols = [], [], []
    for i in range(n):
        for j in range(n):
            if A[i, j] != 0.0:
                jac.append((vm.CONST, 0, i * n + j, 0, 0))
                jac.append((vm.OUT, len(rows), 0, 0, 0))
                rows.append(i)
                cols.append(j)
    return vm.Kernel(n=n, n_regs=n + 2, consts=A.ravel().copy(), rhs_code=_code(rhs),
                     jac_code=_code(jac), jac_rows=np.array(rows, dtype=np.int64),
                     jac_cols=np.array(cols, dtype=np.int64), aux_code=vm.empty_code(),
                     n_aux=0, event_code=vm.empty_code(), n_events=0)


def matrix_with_eigenvalues(lams, seed=1) -> np.ndarray:
    """A = V diag(lams) V^-1 with a well-conditioned random V (invented data)."""
    rng = np.random.default_rng(seed)
    n = len(lams)
    V = np.eye(n) + 0.3 * rng.standard_normal((n, n)) / np.sqrt(n)
    return V @ np.diag(lams) @ np.linalg.inv(V)


# Robertson 1966 chemical kinetics; Hairer & Wanner II, sec. IV.1, eq. (1.4).
ROBERTSON = {
    "title": "Robertson",
    "states": {"y1": 1.0, "y2": 0.0, "y3": 0.0},
    "parameters": {"k1": 0.04, "k2": 3e7, "k3": 1e4},
    "ddt": {"y1": "-k1*y1 + k3*y2*y3",
            "y2": "k1*y1 - k3*y2*y3 - k2*y2^2",
            "y3": "k2*y2^2"},
}

# HIRES, Schaefer 1975; Hairer & Wanner II, sec. IV.10; Test Set for IVP Solvers (Mazzia &
# Magherini), problem HIRES. Coefficients, initial values and the end time 321.8122 as printed
# there; recalled from memory (the tests that use them also check against SciPy at tight rtol).
HIRES = {
    "title": "HIRES",
    "states": {"y1": 1.0, "y2": 0.0, "y3": 0.0, "y4": 0.0, "y5": 0.0, "y6": 0.0,
               "y7": 0.0, "y8": 0.0057},
    "ddt": {"y1": "-1.71*y1 + 0.43*y2 + 8.32*y3 + 0.0007",
            "y2": "1.71*y1 - 8.75*y2",
            "y3": "-10.03*y3 + 0.43*y4 + 0.035*y5",
            "y4": "8.32*y2 + 1.71*y3 - 1.12*y4",
            "y5": "-1.745*y5 + 0.43*y6 + 0.43*y7",
            "y6": "-280*y6*y8 + 0.69*y4 + 1.71*y5 - 0.43*y6 + 0.69*y7",
            "y7": "280*y6*y8 - 1.81*y7",
            "y8": "-280*y6*y8 + 1.81*y7"},
}
HIRES_END = 321.8122

# Van der Pol oscillator x'' - mu (1 - x^2) x' + x = 0, stiff for large mu
# (Hairer & Wanner II, sec. IV.1, unscaled form; period about (3 - 2 ln 2) mu).
VAN_DER_POL = {
    "title": "Van der Pol",
    "states": {"x": 2.0, "v": 0.0},
    "parameters": {"mu": 1000.0},
    "ddt": {"x": "v", "v": "mu*(1 - x^2)*v - x"},
}

# Arenstorf orbit, Hairer, Norsett & Wanner I, sec. II.0, eqs. (0.1)-(0.2): mu = 0.012277471,
# y(0) = (0.994, 0, 0, -2.00158510637908252240537862224) and the period
# 17.0652165601579625588917206249, all as printed there; recalled from memory.
ARENSTORF = {
    "title": "Arenstorf",
    "states": {"y1": 0.994, "y2": 0.0, "v1": 0.0,
               "v2": -2.00158510637908252240537862224},
    "parameters": {"mu": 0.012277471},
    "derived": {"d1": "((y1 + mu)^2 + y2^2)^1.5", "d2": "((y1 - 1 + mu)^2 + y2^2)^1.5"},
    "ddt": {"y1": "v1", "y2": "v2",
            "v1": "y1 + 2*v2 - (1 - mu)*(y1 + mu)/d1 - mu*(y1 - 1 + mu)/d2",
            "v2": "y2 - 2*v1 - (1 - mu)*y2/d1 - mu*y2/d2"},
}
ARENSTORF_PERIOD = 17.0652165601579625588917206249

# Lorenz 1963 (sigma = 10, rho = 28, beta = 8/3); non-stiff.
LORENZ = {
    "title": "Lorenz",
    "states": {"x": 1.0, "y": 1.0, "z": 1.0},
    "parameters": {"s": 10.0, "r": 28.0, "b": 8 / 3},
    "ddt": {"x": "s*(y - x)", "y": "x*(r - z) - y", "z": "x*y - b*z"},
}


def model(spec: dict):
    return prepare(spec)


def scipy_rhs(kernel, p):
    """f(t, y) and J(t, y) through the same kernel, for SciPy oracles."""
    regs = np.zeros(max(kernel.n_regs, 1))
    vals = np.zeros(len(kernel.jac_rows))

    def f(t, y):
        out = np.empty(kernel.n)
        vm.rhs(kernel, t, np.ascontiguousarray(y, dtype=float), p, regs, out)
        return out

    def jac(t, y):
        J = np.empty((kernel.n, kernel.n))
        vm.jac_dense(kernel, t, np.ascontiguousarray(y, dtype=float), p, regs, vals, J)
        return J

    return f, jac


class Prepared:
    """kernel, p, y0 of a hand-built kernel (the fields tests use)."""

    def __init__(self, kernel, p, y0):
        self.kernel, self.p, self.y0 = kernel, p, y0
        self.event_directions = np.zeros(0, dtype=np.int64)
        self.event_terminal = np.zeros(0, dtype=bool)


def brusselator_2d(N: int, alpha: float = 0.1) -> Prepared:
    """2-D Brusselator on an N x N periodic grid (Hairer & Wanner II, sec. IV.10,
    BRUSS-2D, here without the source term), hand-built for large sparse tests. The constants
    (1, 4.4, 3.4, alpha = 0.1) and the starting profiles below are those printed there;
    recalled from memory:

        u' = 1 + u^2 v - 4.4 u + alpha N^2 (five-point Laplacian of u)
        v' = 3.4 u - u^2 v     + alpha N^2 (five-point Laplacian of v)

    States: all u (row-major), then all v. u0 = 22 y (1-y)^1.5, v0 = 27 x (1-x)^1.5.
    """
    assert N >= 3
    M = N * N
    c = alpha * N * N
    consts = np.array([c, 1.0, 4.4, 3.4, 4.0, 2.0, -4.0 * c])
    C, ONE, K44, K34, FOUR, TWO, M4C = range(2 * M, 2 * M + 7)
    SQ, W, D, T, LAP = range(2 * M + 7, 2 * M + 12)
    rhs = [(vm.STATE, k, k, 0, 0) for k in range(2 * M)]
    rhs += [(vm.CONST, 2 * M + j, j, 0, 0) for j in range(7)]

    def nb(i, j):
        return [((i - 1) % N) * N + j, ((i + 1) % N) * N + j,
                i * N + (j - 1) % N, i * N + (j + 1) % N]

    for species in (0, 1):
        for i in range(N):
            for j in range(N):
                k = i * N + j
                u, v = k, M + k
                own = u if species == 0 else v
                rhs.append((vm.SQUARE, SQ, u, 0, 0))
                rhs.append((vm.MUL, W, SQ, v, 0))            # u^2 v
                if species == 0:
                    rhs.append((vm.ADD, D, ONE, W, 0))
                    rhs.append((vm.MUL, T, K44, u, 0))
                    rhs.append((vm.SUB, D, D, T, 0))         # 1 + u^2 v - 4.4 u
                else:
                    rhs.append((vm.MUL, T, K34, u, 0))
                    rhs.append((vm.SUB, D, T, W, 0))         # 3.4 u - u^2 v
                a, b, cc, d = (x + species * M for x in nb(i, j))
                rhs.append((vm.ADD, LAP, a, b, 0))
                rhs.append((vm.ADD, LAP, LAP, cc, 0))
                rhs.append((vm.ADD, LAP, LAP, d, 0))
                rhs.append((vm.MUL, T, FOUR, own, 0))
                rhs.append((vm.SUB, LAP, LAP, T, 0))
                rhs.append((vm.MULADD, D, C, LAP, D))
                rhs.append((vm.OUT, species * M + k, D, 0, 0))
    # Jacobian, row-major sorted COO.
    jac = [(vm.STATE, k, k, 0, 0) for k in range(2 * M)]
    jac += [(vm.CONST, 2 * M + j, j, 0, 0) for j in range(7)]
    rows, cols = [], []
    X = 2 * M + 12
    for species in (0, 1):
        for i in range(N):
            for j in range(N):
                k = i * N + j
                u, v = k, M + k
                row = species * M + k
                entries = {x + species * M: C for x in nb(i, j)}
                # d/du and d/dv of the reaction terms, plus -4c on the diagonal
                jac.append((vm.MUL, X, u, v, 0))
                jac.append((vm.MUL, X, X, TWO, 0))          # 2 u v
                jac.append((vm.SQUARE, X + 1, u, 0, 0))     # u^2
                if species == 0:
                    jac.append((vm.SUB, X + 2, X, K44, 0))
                    jac.append((vm.ADD, X + 2, X + 2, M4C, 0))   # 2uv - 4.4 - 4c
                    entries[u] = X + 2
                    entries[v] = X + 1
                else:
                    jac.append((vm.SUB, X + 2, K34, X, 0))       # 3.4 - 2uv
                    jac.append((vm.NEG, X + 3, X + 1, 0, 0))
                    jac.append((vm.ADD, X + 3, X + 3, M4C, 0))   # -u^2 - 4c
                    entries[u] = X + 2
                    entries[v] = X + 3
                for col in sorted(entries):
                    jac.append((vm.OUT, len(rows), entries[col], 0, 0))
                    rows.append(row)
                    cols.append(col)
    x = np.arange(N) / N
    xx, yy = np.meshgrid(x, x, indexing="ij")
    y0 = np.concatenate([(22 * yy * (1 - yy) ** 1.5).ravel(),
                         (27 * xx * (1 - xx) ** 1.5).ravel()])
    kern = vm.Kernel(n=2 * M, n_regs=X + 4, consts=consts, rhs_code=_code(rhs),
                     jac_code=_code(jac), jac_rows=np.array(rows, dtype=np.int64),
                     jac_cols=np.array(cols, dtype=np.int64), aux_code=vm.empty_code(),
                     n_aux=0, event_code=vm.empty_code(), n_events=0)
    return Prepared(kern, np.zeros(0), y0)
