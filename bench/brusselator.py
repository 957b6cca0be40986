"""2-D Brusselator reaction-diffusion on an N x N periodic grid, as a model dict.

Problem BRUSS-2D (Hairer & Wanner, Solving ODEs II, sec. IV.10; coefficients,
initial values and source term from memory):

    u' = 1 + u^2 v - 4.4 u + alpha (u_xx + u_yy) + f(x, y, t)
    v' = 3.4 u - u^2 v + alpha (v_xx + v_yy)

alpha = 0.1, grid x_i = i/N, y_j = j/N (periodic), five-point Laplacian,
f = 5 inside the disc (x-0.3)^2 + (y-0.6)^2 <= 0.1^2 for t >= 1.1, else 0;
u(0) = 22 y (1-y)^1.5, v(0) = 27 x (1-x)^1.5; t in [0, 11.5].
The model is written in the project's model language (states u_i_j, v_i_j,
diffusion as plain expressions), so it exercises prepare() at scale.
"""
from __future__ import annotations

import numpy as np

ALPHA = 0.1
T_END = 11.5
T_SOURCE = 1.1


def grid(n: int):
    """Grid coordinates (x[i, j], y[i, j]) with x_i = i/N, y_j = j/N."""
    c = np.arange(n) / n
    return np.meshgrid(c, c, indexing="ij")


def source_mask(n: int) -> np.ndarray:
    x, y = grid(n)
    return (x - 0.3) ** 2 + (y - 0.6) ** 2 <= 0.1 ** 2


def initial(n: int) -> np.ndarray:
    """y0 in model order: all u (row-major i, j), then all v."""
    x, y = grid(n)
    u0 = 22.0 * y * (1.0 - y) ** 1.5
    v0 = 27.0 * x * (1.0 - x) ** 1.5
    return np.concatenate([u0.ravel(), v0.ravel()])


def model(n: int) -> dict:
    """The Brusselator as a model dict in the project's JSON layout."""
    mask = source_mask(n)
    y0 = initial(n)
    states, ddt = {}, {}
    for s in ("u", "v"):
        for i in range(n):
            for j in range(n):
                off = 0 if s == "u" else n * n
                states[f"{s}_{i}_{j}"] = float(y0[off + i * n + j])
    for i in range(n):
        for j in range(n):
            ip, im, jp, jm = (i + 1) % n, (i - 1) % n, (j + 1) % n, (j - 1) % n
            for s in ("u", "v"):
                lap = (f"({s}_{ip}_{j} + {s}_{im}_{j} + {s}_{i}_{jp} + {s}_{i}_{jm}"
                       f" - 4*{s}_{i}_{j})")
                if s == "u":
                    rhs = f"1 + u_{i}_{j}^2*v_{i}_{j} - 4.4*u_{i}_{j} + diff*{lap}"
                    if mask[i, j]:
                        rhs += " + 5*step(t - t_source)"
                else:
                    rhs = f"3.4*u_{i}_{j} - u_{i}_{j}^2*v_{i}_{j} + diff*{lap}"
                ddt[f"{s}_{i}_{j}"] = rhs
    return {
        "title": f"2-D Brusselator on a {n}x{n} periodic grid (Hairer & Wanner II, sec. IV.10)",
        "description": "Reaction-diffusion; diffusion written out as five-point Laplacians.",
        "states": states,
        "parameters": {"diff": ALPHA * n * n, "t_source": T_SOURCE},
        "ddt": ddt,
    }


def sparsity(n: int):
    """Jacobian sparsity pattern (scipy.sparse CSR, 0/1) for the hand-written peers."""
    import scipy.sparse as sp
    m = n * n
    idx = np.arange(m).reshape(n, n)
    rows, cols = [], []
    for di, dj in ((0, 0), (1, 0), (-1, 0), (0, 1), (0, -1)):
        nb = np.roll(np.roll(idx, -di, axis=0), -dj, axis=1).ravel()
        rows.append(idx.ravel())
        cols.append(nb)
    r = np.concatenate(rows)
    c = np.concatenate(cols)
    lap = sp.csr_matrix((np.ones(len(r)), (r, c)), shape=(m, m))
    eye = sp.identity(m, format="csr")
    pat = sp.bmat([[lap, eye], [eye, lap]], format="csr")
    pat.data[:] = 1.0
    return pat
