"""Stiffness diagnostics for the report: dominant eigenvalues of J = df/dy and
the stiffness ratio at a few sample times.

For n <= 200 the eigenvalues come from numpy.linalg.eigvals; beyond that only
the spectral radius is estimated (power iteration) and the ratio is unknown.
Stiffness ratio = max |Re lambda| / min |Re lambda| over eigenvalues with
Re lambda < 0, ignoring those below 1e-12 of the largest (conservation laws
give exact zeros).
"""
from __future__ import annotations

import numpy as np

from engine import vm

EIG_MAX_N = 200
N_SAMPLES = 5
N_DOMINANT = 3


def _finite(x):
    x = float(x)
    return x if np.isfinite(x) else None


def sample(kernel, p, t: np.ndarray, y: np.ndarray, boundary: float) -> list[dict]:
    """Eigen-information of the Jacobian at up to N_SAMPLES of the given points."""
    if len(t) == 0 or kernel.n == 0:
        return []
    idx = np.unique(np.linspace(0, len(t) - 1, min(N_SAMPLES, len(t))).round().astype(int))
    n = kernel.n
    regs = np.zeros(max(kernel.n_regs, 1))
    vals = np.zeros(len(kernel.jac_rows))
    J = np.zeros((n, n)) if n <= EIG_MAX_N else None
    out = []
    for i in idx:
        entry = {"t": float(t[i])}
        if J is not None:
            vm.jac_dense(kernel, t[i], y[i], p, regs, vals, J)
            if not np.all(np.isfinite(J)):
                continue
            lam = np.linalg.eigvals(J)
            order = np.argsort(-np.abs(lam))
            rho = float(np.abs(lam[order[0]])) if n else 0.0
            re = -lam.real[lam.real < 0]
            re = re[re > 1e-12 * max(rho, 1e-300)]
            entry["dominant_eigenvalues"] = [[float(lam[k].real), float(lam[k].imag)]
                                             for k in order[:N_DOMINANT]]
            entry["spectral_radius"] = rho
            entry["stiffness_ratio"] = _finite(re.max() / re.min()) if len(re) else None
        else:
            rho = _sparse_radius(kernel, t[i], y[i], p, regs, vals)
            entry["dominant_eigenvalues"] = None
            entry["spectral_radius"] = _finite(rho)
            entry["stiffness_ratio"] = None
        entry["explicit_step"] = _finite(boundary / rho) if rho > 0 else None
        out.append(entry)
    return out


def _sparse_radius(kernel, t, y, p, regs, vals, iters=30):
    vm.jac_values(kernel, t, y, p, regs, vals)
    rows, cols = kernel.jac_rows, kernel.jac_cols
    v = np.ones(kernel.n) / np.sqrt(kernel.n)
    rho = 0.0
    for _ in range(iters):
        w = np.bincount(rows, weights=vals * v[cols], minlength=kernel.n)
        nw = float(np.linalg.norm(w))
        if not (nw > 0 and np.isfinite(nw)):
            break
        rho = max(rho, nw)
        v = w / nw
    return rho


def dopri5_real_boundary() -> float:
    """Where |R(z)| = 1 on the negative real axis for DOPRI5 (used by docs)."""
    from engine.tableaux import DP_A
    b = DP_A[6]
    A = DP_A[:7, :7]

    def R(z):
        Y = np.linalg.solve(np.eye(7) - z * A, np.ones(7))
        return 1 + z * b @ Y

    lo, hi = -2.0, -4.0
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        if abs(R(mid)) <= 1:
            lo = mid
        else:
            hi = mid
    return -lo
