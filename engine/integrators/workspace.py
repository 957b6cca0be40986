"""The arrays of one run and the pool that reuses them.

A run's state lives in plain numpy arrays laid out by ``engine.integrators.state`` (the
compiled loop mutates them); a sweep integrates thousands of times with the same shapes,
so finished dense-path runs are kept per shape and handed out again (``take_run``,
``give_back``).
"""
from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

from engine.integrators import driver, state as S
from engine.integrators.sparse import bdf, core as sparse, radau as sparse_radau
from engine.integrators.switching import P_IMPLICIT
from engine.integrators.tableaux import BDF, DORMAND_PRINCE, RADAU_IIA, ROSENBROCK
from engine.kernels import vm

if TYPE_CHECKING:
    from engine.integrate import SolverOptions

PINNED = {"auto": -1, "dormand_prince_54": DORMAND_PRINCE, "radau_iia_5": RADAU_IIA,
          "rosenbrock_4": ROSENBROCK, "bdf": BDF}
HIST_ROWS = 1024   # step-history buffer (thinned by two when full)
SWITCH_ROWS = 64   # switch-log rows kept (all switches are counted)


class _Run:
    """All arrays of one run (plain numpy; the compiled loop mutates them).

    Dense-path runs are kept for reuse (see :func:`take_run`): a sweep calls
    integrate thousands of times with the same shapes, and building some twenty
    arrays costs more than a short solve."""

    def __init__(self, kernel, t_out, o: SolverOptions):
        n, ne = kernel.n, kernel.n_events
        implicit = o.method != "dormand_prince_54"
        self.sparse = o.method == "bdf" or (implicit and sparse.wants_sparse(kernel))
        self.pattern = sparse.Pattern(kernel) if self.sparse else None
        self.sparse_lu = None
        m = n if implicit and not self.sparse else 0
        cap = o.max_events if ne else 0
        hist_rows = HIST_ROWS if o.diagnostics == "full" else 0  # "counts": no history
        # One zeroed buffer per dtype, cut into C-contiguous views.
        (self.y, self.y0, self.regs, self.atol, self.V, self.cont, self.J, self.jv,
         self.LU, self.y_out, self.gv, self.ev_t, self.ev_y, self.swlog, self.hist,
         self.fs) = _carve(np.float64, (n,), (n,), (max(kernel.n_regs, 1),), (n,),
                           (S.N_ROWS, n), (6, n), (m, m), (len(kernel.jac_rows),), (m, m),
                           (len(t_out), n), (4, ne), (cap,), (cap, n), (SWITCH_ROWS, 7),
                           (hist_rows, 4), (S.N_FS,))
        self.piv, self.pivc, self.ev_i, self.iw = _carve(np.int64, (m,), (m,), (cap,),
                                                         (S.N_IW,))
        self.LUc, self.cbuf = _carve(np.complex128, (m, m), (m,))
        self.buffers = [a.base for a in (self.y, self.piv, self.LUc)]
        self.D = np.zeros((bdf.MAX_ORDER + 3, n)) if self.sparse else None
        if self.sparse:  # sparse Radau IIA (engine.integrators.sparse.radau): work rows, complex rhs
            self.sparse_luc = None
            self.radau_work = np.zeros((sparse_radau.N_WORK, n))
            self.radau_c = np.zeros(n, dtype=np.complex128)
        self.fresh = True
        self.pol = self.pol_of = None
        self.no_dir = np.zeros(ne, dtype=np.int64)   # event directions / terminal flags
        self.no_term = np.zeros(ne, dtype=np.bool_)  # when the options give none
        self.code_seen = None
        self.has_time = 0
        self.key = None  # pool key (_pool_key)

    def reset(self, kernel, p, y0, t0, t1, t_out, o: SolverOptions):
        if not self.fresh:
            for buf in self.buffers:
                buf.fill(0)
            if self.D is not None:
                self.D.fill(0.0)
        self.fresh = False
        self.y[:] = y0
        self.y0[:] = y0
        self.atol[:] = o.atol
        self.p = p if _plain(p) else np.array(p, dtype=np.float64)  # a writeable copy
        if self.pol_of is not o.policy:  # a sweep passes the same policy every time
            self.pol, self.pol_of = o.policy.as_array(), o.policy
            if self.sparse:  # stiff phases of auto run the sparse BDF
                self.pol[P_IMPLICIT] = BDF
        if o.nonnegative is not False and o.nonnegative is not None:
            self.V[S.V_NNMASK] = o.nonnegative
        self.t_out = t_out
        self.ev_dir = (self.no_dir if o.event_directions is None
                       else _writeable(o.event_directions, np.int64))
        self.ev_term = (self.no_term if o.event_terminal is None
                        else _writeable(o.event_terminal, np.bool_))
        fs = self.fs
        fs[S.F_T] = fs[S.F_T0] = t0
        fs[S.F_TEND] = t1
        fs[S.F_H] = o.first_step or 0.0
        fs[S.F_HMAX] = min(o.max_step, t1 - t0)
        fs[S.F_RTOL] = o.rtol
        fs[S.F_ERR_OLD] = 1e-4
        fs[S.F_NEWTON_TOL] = max(10 * 2.22e-16 / o.rtol, min(0.03, o.rtol ** 0.5))
        iw = self.iw
        pinned = PINNED[o.method]
        iw[S.I_PINNED] = pinned
        iw[S.I_METHOD] = DORMAND_PRINCE if pinned < 0 else pinned
        if self.sparse and pinned >= 0:  # large sparse Jacobian: SuperLU (engine.integrators.sparse.core,
            # engine.integrators.sparse.radau, engine.integrators.sparse.bdf); auto starts explicit and switches to
            # the sparse BDF
            iw[S.I_PINNED] = iw[S.I_METHOD] = pinned if pinned in (ROSENBROCK, RADAU_IIA) else BDF
        iw[S.I_MAX_STEPS] = o.max_steps
        # "full" times each method (a switch ends a chunk); the sparse path dispatches
        # between Python and compiled loops at a switch; "counts" runs on through switches
        iw[S.I_SWITCH_RETURNS] = int(o.diagnostics == "full" or self.sparse)
        iw[S.I_HIST_STRIDE] = 1
        iw[S.I_STEPS_IN_METHOD] = o.policy.min_steps  # no hysteresis for the first method
        iw[S.I_FIRST] = 1
        iw[S.I_JAC_CURRENT] = -1
        iw[S.I_NONNEG] = 0 if o.nonnegative is False or o.nonnegative is None \
            else int(self.V[S.V_NNMASK].any())
        if self.code_seen is not kernel.rhs_code:  # same program as the last run: known
            self.code_seen = kernel.rhs_code
            self.has_time = int(vm.reads_time(kernel.rhs_code))
        iw[S.I_HAS_TIME] = self.has_time
        return self

    def advance(self, kernel, budget):
        method = self.iw[S.I_METHOD]
        if self.sparse and method != DORMAND_PRINCE:  # SuperLU: see sparse.single_threaded_blas
            step = (bdf.advance if method == BDF else
                    sparse_radau.advance if method == RADAU_IIA else sparse.advance)
            with sparse.single_threaded_blas():
                step(kernel, self, self.pattern, budget)
            return
        driver.advance(kernel, self.p, self.regs, self.y, self.atol, self.pol, self.fs,
                       self.iw, self.V, self.cont, self.J, self.jv, self.LU, self.piv,
                       self.LUc, self.pivc, self.cbuf, self.t_out, self.y_out, self.gv,
                       self.ev_dir, self.ev_term, self.ev_t, self.ev_i, self.ev_y,
                       self.swlog, self.hist, budget)


_POOL: dict[tuple, list[_Run]] = {}
POOL_KEYS = 32          # distinct run shapes kept
POOL_PER_KEY = 4        # runs kept per shape (threads may integrate concurrently)
POOL_MAX_VALUES = 1 << 16  # larger runs (long output grids, big models) are not kept


def _pool_key(kernel, t_out, o):
    return (kernel.n, kernel.n_regs, len(kernel.jac_rows), kernel.n_events, o.method,
            o.max_events, o.diagnostics == "full", len(t_out))


def take_run(kernel, p, y0, t0, t1, t_out, o) -> _Run:
    key = _pool_key(kernel, t_out, o)
    free = _POOL.get(key)
    try:
        run = free.pop() if free else None
    except IndexError:  # another thread took the last one
        run = None
    if run is None:
        run = _Run(kernel, t_out, o)
        run.key = key
    return run.reset(kernel, p, y0, t0, t1, t_out, o)


def give_back(kernel, run, o):
    """Keep a finished dense-path run for the next call with the same shapes."""
    if run.sparse or run.buffers[0].size > POOL_MAX_VALUES:
        return
    key = run.key
    free = _POOL.get(key)
    if free is None:
        if len(_POOL) >= POOL_KEYS:
            _POOL.clear()
        free = _POOL.setdefault(key, [])
    if len(free) < POOL_PER_KEY:
        run.p = run.t_out = None  # hold no caller arrays
        free.append(run)


def _plain(a) -> bool:
    """A writeable C-contiguous float64 numpy array: the compiled loop takes it as it is
    (a read-only array is another type to numba and would compile the loop again)."""
    f = a.flags if type(a) is np.ndarray else None
    return f is not None and a.dtype == np.float64 and f.c_contiguous and f.writeable


def _writeable(a, dtype) -> np.ndarray:
    """``a`` as a writeable C-contiguous array of ``dtype``. A read-only array (a prepared
    model's event flags are frozen) is another type to numba: passing one would make each
    worker process load a second specialisation of the compiled loop on its first job
    (about 0.1 s), one that the warm-up never touched."""
    a = np.asarray(a, dtype=dtype)
    return a if a.flags.writeable and a.flags.c_contiguous else np.array(a, dtype=dtype)


def _carve(dtype, *shapes):
    """Zeroed C-contiguous arrays of the given shapes, all views of one buffer."""
    sizes = [math.prod(sh) for sh in shapes]
    buf = np.zeros(sum(sizes), dtype=dtype)
    out, k = [], 0
    for sh, size in zip(shapes, sizes):
        out.append(buf[k:k + size].reshape(sh))
        k += size
    return out
