"""Large sparse systems: SuperLU on the Jacobian's pattern, the loop head and the
return to the explicit method shared by the sparse methods (engine.integrators.sparse.bdf,
engine.integrators.sparse.radau), and Rosenbrock 4(3) steps.

Used when n > SPARSE_MIN_N and the Jacobian has under SPARSE_MAX_DENSITY of
its entries non-zero (e.g. reaction-diffusion grids). The step loop runs in
Python (the per-step Python cost is small next to a sparse factorisation);
vector work, the interpolant, outputs and events use the compiled helpers of
the dense path on the same state arrays, so counters, outcomes and the report
are shared. Method: Rosenbrock 4(3) (Hairer & Wanner II, sec. VI.4) with
scipy.sparse.linalg.splu on (1/(gamma h)) I - J, in CSC form built from the
kernel's COO pattern (jac_rows, jac_cols) plus the diagonal.
"""
from __future__ import annotations

import contextlib

import numpy as np
from scipy.sparse import csc_matrix
from scipy.sparse.linalg import splu

from engine.integrators import rosenbrock_4, state as S
from engine.kernels import vm
from engine.integrators.driver import EPS, _finish, _switch
from engine.integrators.errors_norm import err_norm
from engine.integrators.steps import reject
from engine.integrators.switching import P_BOUNDARY, REASON_EXPLICIT_CHEAPER, implicit_says_nonstiff
from engine.integrators.tableaux import DORMAND_PRINCE, RO_A, RO_C, RO_CC, RO_D, RO_GAMMA

SPARSE_MIN_N = 200
SPARSE_MAX_DENSITY = 0.05


def wants_sparse(kernel) -> bool:
    n = kernel.n
    return n > SPARSE_MIN_N and len(kernel.jac_rows) < SPARSE_MAX_DENSITY * n * n


_BLAS = []


def single_threaded_blas():
    """Context with one BLAS thread, for the SuperLU calls of the sparse path: on a
    busy machine (2 cores, another process running), spinning BLAS threads made
    single factorisations of the 2-D Brusselator (2048 states) take up to 2.5 s
    instead of 8 ms (complex) and 33 ms instead of 5 ms (real); with one thread
    they stay at 7-16 ms and 4-22 ms. Unloaded, two threads gain nothing at 2048
    states and 2-9 % of the run time at 32768 (measured)."""
    if not _BLAS:
        try:
            from threadpoolctl import ThreadpoolController
            _BLAS.append(ThreadpoolController())
        except ImportError:  # optional at run time
            _BLAS.append(None)
    if _BLAS[0] is None:
        return contextlib.nullcontext()
    return _BLAS[0].limit(limits=1, user_api="blas")


class Factors:
    """SuperLU factors ``lu`` of P A P^T for a permutation P (``perm``: old index
    -> new index, ``inv`` its inverse); ``solve`` works in A's order."""

    __slots__ = ("lu", "perm", "inv")

    def __init__(self, lu, perm, inv):
        self.lu, self.perm, self.inv = lu, perm, inv

    def solve(self, b):
        return self.lu.solve(b[self.inv])[self.perm]


# SuperLU supernode relaxation and panel size: small supernodes suit the sparse
# grids this path sees (2-D Brusselator, 2048 states: 3.4 ms per factorisation
# against 4.3 ms with the library defaults; no difference at 32768 states).
RELAX = 2
PANEL_SIZE = 8


class Pattern:
    """CSC structure of J + diagonal, with the data slots of each COO entry.

    The fill-reducing column ordering (minimum degree on A^T + A, which suits
    the structurally symmetric patterns of reaction-diffusion grids: half the
    fill of COLAMD, measured) depends on the structure only: it is computed by
    the first factorisation, and later ones factor the symmetrically permuted
    matrix P A P^T, assembled directly in permuted CSC order, with the natural
    ordering (same fill, no ordering cost)."""

    def __init__(self, kernel):
        n = kernel.n
        rows = np.concatenate([kernel.jac_rows, np.arange(n)])
        cols = np.concatenate([kernel.jac_cols, np.arange(n)])
        keys = cols * n + rows
        uniq, inverse = np.unique(keys, return_inverse=True)
        self.n = n
        self.indices = (uniq % n).astype(np.int32)
        self.indptr = np.searchsorted(uniq // n, np.arange(n + 1)).astype(np.int32)
        nnz = len(kernel.jac_rows)
        self.pos_j = inverse[:nnz]
        self.pos_d = inverse[nnz:]
        self.data = np.zeros(len(uniq))
        self.cdata = None  # complex values (factor_complex), made on first use
        self.perm = self.inv = None
        self.p_indices = self.p_indptr = self.p_pos_j = self.p_pos_d = None

    def _set_order(self, perm_c):
        """Permuted CSC structure for B = P A P^T, B[perm[i], perm[j]] = A[i, j]."""
        n = self.n
        perm = np.asarray(perm_c, dtype=np.int64)
        cols = np.repeat(np.arange(n), np.diff(self.indptr))
        new_r = perm[self.indices]
        new_c = perm[cols]
        order = np.argsort(new_c * n + new_r, kind="stable")
        slot = np.empty(len(order), dtype=np.int64)
        slot[order] = np.arange(len(order))
        self.p_indices = new_r[order].astype(np.int32)
        self.p_indptr = np.searchsorted(new_c[order], np.arange(n + 1)).astype(np.int32)
        self.p_pos_j = slot[self.pos_j]
        self.p_pos_d = slot[self.pos_d]
        self.perm = perm
        self.inv = np.argsort(perm)

    def factor(self, vals, shift, scale=1.0):
        """Factors of shift I - scale J (J's COO values in ``vals``)."""
        d = self.data
        d[:] = 0.0
        first = self.perm is None
        pos_j, pos_d = (self.pos_j, self.pos_d) if first else (self.p_pos_j, self.p_pos_d)
        d[pos_j] = vals * -scale  # COO entries are unique
        d[pos_d] += shift
        if first:
            A = csc_matrix((d, self.indices, self.indptr), shape=(self.n, self.n))
            lu = splu(A, permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.1, relax=RELAX,
                      panel_size=PANEL_SIZE, options={"SymmetricMode": True})
            self._set_order(lu.perm_c)
            ident = np.arange(self.n)
            return Factors(lu, ident, ident)
        B = csc_matrix((d, self.p_indices, self.p_indptr), shape=(self.n, self.n))
        B.has_sorted_indices = True
        # prefer diagonal pivots unless they are small
        lu = splu(B, permc_spec="NATURAL", diag_pivot_thresh=0.1, relax=RELAX,
                  panel_size=PANEL_SIZE, options={"SymmetricMode": True})
        return Factors(lu, self.perm, self.inv)

    def factor_complex(self, vals, shift):
        """Factors of shift I - J for a complex ``shift`` (Radau IIA's complex pair,
        engine.integrators.sparse.radau), with the ordering of the real factorisations."""
        if self.perm is None:  # the first real factorisation computes the ordering
            self.factor(vals, abs(shift))
        d = self.cdata
        if d is None:
            d = self.cdata = np.zeros(len(self.data), dtype=np.complex128)
        d[:] = 0.0
        d[self.p_pos_j] = -vals
        d[self.p_pos_d] += shift
        B = csc_matrix((d, self.p_indices, self.p_indptr), shape=(self.n, self.n))
        B.has_sorted_indices = True
        lu = splu(B, permc_spec="NATURAL", diag_pivot_thresh=0.1, relax=RELAX,
                  panel_size=PANEL_SIZE, options={"SymmetricMode": True})
        return Factors(lu, self.perm, self.inv)

    def spectral_radius(self, vals, v, iters=6):
        """Power-iteration estimate on the sparse J (geometric mean of growth)."""
        A = csc_matrix((np.zeros_like(self.data), self.indices, self.indptr),
                       shape=(self.n, self.n))
        A.data[self.pos_j] = vals
        nv = np.linalg.norm(v)
        if not (nv > 0 and np.isfinite(nv)):
            v[:] = 1.0 + 0.1 * np.arange(self.n) / self.n
            nv = np.linalg.norm(v)
        v /= nv
        logs = []
        for _ in range(iters):
            w = A @ v
            nw = np.linalg.norm(w)
            if not (nw > 0 and np.isfinite(nw)):
                break
            logs.append(np.log(nw))
            v[:] = w / nw
        return float(np.exp(np.mean(logs))) if logs else 0.0


def _attempt(kernel, run, lu, t, h):
    """One Rosenbrock 4(3) step with the factors in ``lu``; returns (error norm, rhs evals)."""
    V, y, p, regs = run.V, run.y, run.p, run.regs
    K = V[S.V_K:S.V_K + 6]
    ytmp, f0, fdt = V[S.V_YTMP], V[S.V_F0], V[S.V_FDT]
    nfev = 0
    for s in range(6):
        if s == 0:
            rhs = f0.copy()
        else:
            np.copyto(ytmp, y)
            for j in range(s):
                if RO_A[s, j] != 0.0:
                    ytmp += RO_A[s, j] * K[j]
            vm.rhs(kernel, t + RO_C[s] * h, ytmp, p, regs, K[s])
            nfev += 1
            rhs = K[s].copy()
            for j in range(s):
                rhs += (RO_CC[s, j] / h) * K[j]
        if RO_D[s] != 0.0 and run.iw[S.I_HAS_TIME]:
            rhs += (h * RO_D[s]) * fdt
        K[s] = lu.solve(rhs)
    ynew = V[S.V_YNEW]
    np.add(ytmp, K[5], out=ynew)
    return err_norm(K[5], y, ynew, run.atol, run.fs[S.F_RTOL]), nfev


def new_jacobian(kernel, run, pattern, t, y):
    """Jacobian values at (t, y) on the pattern, counted, with the spectral radius and
    the explicit step it allows (engine.integrators.steps.new_jacobian for the sparse methods)."""
    vm.jac_values(kernel, t, y, run.p, run.regs, run.jv)
    run.iw[S.I_NJEV] += 1
    run.iw[S.I_JAC_CURRENT] = 1
    rho = pattern.spectral_radius(run.jv, run.V[S.V_PV])
    run.fs[S.F_RHO] = rho
    run.fs[S.F_HEXP] = run.pol[P_BOUNDARY] / rho if rho > 0 else np.inf


def _jacobian(kernel, run, pattern, t):
    iw, fs, V = run.iw, run.fs, run.V
    new_jacobian(kernel, run, pattern, t, run.y)
    iw[S.I_LU_VALID] = 0
    if iw[S.I_HAS_TIME]:
        dt = np.sqrt(EPS) * max(abs(t), fs[S.F_H])
        vm.rhs(kernel, t + dt, run.y, run.p, run.regs, V[S.V_FDT])
        iw[S.I_NFEV] += 1
        V[S.V_FDT] = (V[S.V_FDT] - V[S.V_F0]) / dt


def next_step(run, steps, budget):
    """The loop head of every sparse method (as in engine.integrators.driver.advance): copy the
    outputs the run has reached, end it at t_end, at the step limit or when the step
    size underflows (the outcome named by the last failure), end the chunk after
    ``budget`` steps. Returns the step size to attempt, or None to leave the loop."""
    fs, iw = run.fs, run.iw
    t = fs[S.F_T]
    k, m = iw[S.I_IOUT], len(run.t_out)
    while k < m and run.t_out[k] <= t:
        run.y_out[k] = run.y
        k += 1
    iw[S.I_IOUT] = k
    tend = fs[S.F_TEND]
    if t >= tend:
        iw[S.I_STATUS] = S.DONE
        return None
    if steps >= budget:
        return None
    if iw[S.I_ACCEPTED] + iw[S.I_REJECTED] >= iw[S.I_MAX_STEPS]:
        iw[S.I_STATUS] = S.ST_STEP_LIMIT
        return None
    h = min(fs[S.F_H], fs[S.F_HMAX])
    if t + 1.01 * h >= tend:
        h = tend - t
    if h < 16 * EPS * abs(t) or not h > 0:
        kind = iw[S.I_FAIL_KIND]
        iw[S.I_STATUS] = (S.ST_NON_FINITE if kind == S.FAIL_NONFINITE else
                          S.ST_NEWTON_FAILURE if kind in (S.FAIL_NEWTON, S.FAIL_SINGULAR)
                          else S.ST_STEP_UNDERFLOW)
        return None
    return h


def explicit_cheaper(run, h) -> bool:
    """auto: the switching policy's test after an accepted step (rho from the last
    Jacobian's spectral-radius estimate)."""
    iw = run.iw
    return bool(implicit_says_nonstiff(run.pol, iw[S.I_STIFF_POS:S.I_STIFF_POS + 2], h,
                                       run.fs[S.F_RHO], iw[S.I_STEPS_IN_METHOD]))


def to_explicit(kernel, run):
    """Hand the run back to the compiled Dormand-Prince loop (engine.integrators.driver)."""
    fs, iw, V = run.fs, run.iw, run.V
    _switch(fs, iw, run.swlog, DORMAND_PRINCE, REASON_EXPLICIT_CHEAPER)
    iw[S.I_RETURN] = 0  # the Python loop dispatches the next chunk to the driver
    fs[S.F_H] = min(fs[S.F_H], 0.5 * fs[S.F_HEXP])
    vm.rhs(kernel, fs[S.F_T], run.y, run.p, run.regs, V[S.V_F0])
    iw[S.I_NFEV] += 1
    V[S.V_K] = V[S.V_F0]  # first-same-as-last stage of the explicit method


def advance(kernel, run, pattern, budget):
    """Python twin of engine.integrators.driver.advance for the sparse Rosenbrock path."""
    fs, iw = run.fs, run.iw
    steps = 0
    lu = run.sparse_lu
    while iw[S.I_STATUS] == S.RUNNING:
        h = next_step(run, steps, budget)
        if h is None:
            break
        t = fs[S.F_T]
        steps += 1
        if iw[S.I_JAC_CURRENT] != 1:
            _jacobian(kernel, run, pattern, t)
        if not iw[S.I_LU_VALID] or fs[S.F_H_LU] != h:
            iw[S.I_NLU] += 1
            try:
                lu = pattern.factor(run.jv, 1.0 / (RO_GAMMA * h))
            except RuntimeError:  # exactly singular
                _reject(run, h, 0.5, S.FAIL_SINGULAR)
                continue
            iw[S.I_LU_VALID] = 1
            fs[S.F_H_LU] = h
        err, nf = _attempt(kernel, run, lu, t, h)
        iw[S.I_NFEV] += nf
        _decide(kernel, run, err, h)
    run.sparse_lu = lu


def _reject(run, h, fac, kind):
    reject(run.fs, run.iw, h, fac, kind)


def _decide(kernel, run, err, h):
    fs, iw, V = run.fs, run.iw, run.V
    if not err < np.inf:
        _reject(run, h, 0.2, S.FAIL_NONFINITE)
        return
    ynew = V[S.V_YNEW]
    mask = V[S.V_NNMASK]
    if err <= 1.0 and iw[S.I_NONNEG]:
        scale = run.atol + fs[S.F_RTOL] * np.abs(run.y)
        if np.any((mask != 0) & (ynew < -scale)):
            iw[S.I_NONNEG_REJECTS] += 1
            _reject(run, h, 0.5, S.FAIL_ERROR)
            return
    first = bool(iw[S.I_FIRST])
    if err > 1.0:
        _reject(run, h, rosenbrock_4.step_factor(h, fs[S.F_H_OLD], err, fs[S.F_ERR_OLD], False,
                                          first), S.FAIL_ERROR)
        return
    fac = rosenbrock_4.step_factor(h, fs[S.F_H_OLD], err, fs[S.F_ERR_OLD], True, first)
    if iw[S.I_LAST_REJECTED]:
        fac = min(fac, 1.0)
    fs[S.F_H_OLD] = h
    fs[S.F_ERR_OLD] = max(0.01, err)
    rosenbrock_4.prepare_dense(run.y, ynew, V[S.V_K:S.V_K + 6], run.cont)
    fs[S.F_H] = h * fac
    iw[S.I_JAC_CURRENT] = 0
    if _finish(kernel, run.p, run.regs, run.y, run.atol, fs, iw, V, run.cont, run.pol,
               run.t_out, run.y_out, run.gv, run.ev_dir, run.ev_term, run.ev_t, run.ev_i,
               run.ev_y, run.hist, h):
        return
    vm.rhs(kernel, fs[S.F_T], run.y, run.p, run.regs, V[S.V_F0])
    iw[S.I_NFEV] += 1
