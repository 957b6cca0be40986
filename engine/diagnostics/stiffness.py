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
from numba import njit

from engine.kernels import vm

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
    m = len(t)
    k = min(N_SAMPLES, m)
    idx = sorted({round(i * (m - 1) / (k - 1)) for i in range(k)}) if k > 1 else [0]
    n = kernel.n
    regs = np.zeros(max(kernel.n_regs, 1))
    vals = np.zeros(len(kernel.jac_rows))
    if n > EIG_MAX_N:
        return [_entry(float(t[i]), None, _sparse_radius(kernel, t[i], y[i], p, regs, vals), boundary)
                for i in idx]
    # One compiled call for every sample's Jacobian, one stacked eigenvalue call, and plain
    # Python on the few eigenvalues: for small systems per-call costs dominate the arithmetic.
    ts = np.ascontiguousarray(t[idx], dtype=float)
    Js = np.zeros((len(idx), n, n))
    _jacobians(kernel.jac_code, kernel.consts, kernel.jac_rows, kernel.jac_cols, ts,
               np.ascontiguousarray(y[idx], dtype=float), np.ascontiguousarray(p, dtype=float),
               regs, vals, Js)
    finite = np.isfinite(Js).all(axis=(1, 2))
    if not finite.any():
        return []
    return [_entry(ti, lam, None, boundary)
            for ti, lam in zip(ts[finite].tolist(), np.linalg.eigvals(Js[finite]).tolist())]


def _entry(t: float, lam: list | None, rho: float | None, boundary: float) -> dict:
    """One sample of the report: dominant eigenvalues, spectral radius, stiffness ratio."""
    entry = {"t": t, "dominant_eigenvalues": None, "stiffness_ratio": None}
    if lam is not None:
        ranked = sorted(lam, key=abs, reverse=True)
        rho = abs(ranked[0])
        # decaying modes only, ignoring exact zeros (conservation laws)
        decay = [-z.real for z in lam if z.real < 0 and -z.real > 1e-12 * max(rho, 1e-300)]
        entry["dominant_eigenvalues"] = [[z.real, z.imag] for z in ranked[:N_DOMINANT]]
        entry["stiffness_ratio"] = _finite(max(decay) / min(decay)) if decay else None
    entry["spectral_radius"] = _finite(rho)
    entry["explicit_step"] = _finite(boundary / rho) if rho and rho > 0 else None
    return entry


@njit(cache=True)
def _jacobians(jac_code, consts, rows, cols, ts, ys, p, regs, vals, Js):
    """Dense Jacobians at several points (plain arrays: a cheap call from Python)."""
    for i in range(ts.shape[0]):
        vm.run(jac_code, consts, ts[i], ys[i], p, regs, vals)
        for k in range(vals.shape[0]):
            Js[i, rows[k], cols[k]] = vals[k]


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


def dormand_prince_54_real_boundary() -> float:
    """Where |R(z)| = 1 on the negative real axis for Dormand-Prince 5(4) (used by docs)."""
    from engine.integrators.tableaux import DP_A
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
