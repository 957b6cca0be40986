"""Every solver compared, behind one call: ``run(problem, rtol, cap_seconds) -> dict``.

Labels: ``engine/auto``, ``engine/<method>``, ``solve_ivp/<method>``,
``solve_ivp/<method>+jac``, ``odeint+numba``, ``cvode+numba``. A peer whose library
is missing is listed with ``available=False`` and its reason; a run that cannot be
done (memory, size) returns status "unavailable"; a run that stops early
"failed"; one that passes the wall-time cap "timeout".
"""
from __future__ import annotations

import time
import warnings
from dataclasses import dataclass
from typing import Callable

import numpy as np

from bench.problems import Problem, prepare_problem

DENSE_LIMIT = 4096       # states above which dense n x n linear algebra is not attempted
IVP_METHODS = ("RK45", "DOP853", "Radau", "BDF", "LSODA")
IMPLICIT_IVP = ("Radau", "BDF", "LSODA")


@dataclass
class Peer:
    label: str
    family: str            # engine, solve_ivp, odeint, cvode
    run: Callable          # (problem, rtol, cap) -> dict
    available: bool = True
    reason: str = ""


def _result(status, y=None, message="", **counts) -> dict:
    out = {"status": status, "y": None if y is None else np.asarray(y, dtype=float),
           "message": message}
    out.update({k: (None if v is None else int(v)) for k, v in counts.items()})
    return out


def _unavailable(reason):
    return _result("unavailable", message=reason)


def _too_big(problem: Problem, what: str):
    gb = 8.0 * problem.n ** 2 / 1e9
    return _unavailable(f"{what} needs dense {problem.n}x{problem.n} matrices ({gb:.1f} GB each)")


# --- the engine ----------------------------------------------------------

def engine_run(method: str):
    def run(problem: Problem, rtol: float, cap: float) -> dict:
        from engine.integrate import SolverOptions, integrate
        pm = prepare_problem(problem)
        if method != "dormand_prince_54" and problem.n > DENSE_LIMIT and not _engine_sparse(pm.kernel):
            return _too_big(problem, f"engine/{method}")
        opts = SolverOptions(method=method, rtol=rtol, atol=problem.atol(rtol),
                             max_wall_seconds=cap, diagnostics="counts",
                             max_steps=50_000_000)
        sol = integrate(pm.kernel, pm.p, pm.y0, (0.0, problem.t_end),
                        np.array([problem.t_end]), opts)
        rep = sol.report
        status = {"succeeded": "ok", "time_limit": "timeout"}.get(sol.outcome, "failed")
        y = sol.y[-1] if status == "ok" and len(sol.y) else None
        return _result(status, y, "" if status == "ok" else f"{sol.outcome}: {sol.message}",
                       steps=rep.get("accepted_steps"), nfev=rep.get("rhs_evaluations"),
                       njev=rep.get("jacobian_evaluations"), nlu=rep.get("lu_factorizations"))
    return run


def _engine_sparse(kernel) -> bool:
    """Does the engine take its sparse linear-algebra path for this kernel?"""
    try:
        from engine.integrators.sparse import core as sparse
        return bool(sparse.wants_sparse(kernel))
    except (ImportError, AttributeError):
        return False


# --- SciPy solve_ivp with numpy right-hand sides ---------------------------

class _Timeout(Exception):
    pass


def _capped(f, cap):
    """f with a wall-clock check on every call (how a plain Python rhs can be stopped)."""
    deadline = time.perf_counter() + cap

    def g(t, y):
        if time.perf_counter() > deadline:
            raise _Timeout
        return f(t, y)
    return g


def ivp_run(method: str, with_jac: bool):
    def run(problem: Problem, rtol: float, cap: float) -> dict:
        from scipy.integrate import solve_ivp
        from bench.brusselator import sparsity
        kw = {}
        if with_jac:
            kw["jac"] = problem.jac
        elif method in IMPLICIT_IVP and problem.sparse and method != "LSODA":
            kw["jac_sparsity"] = sparsity(int(round((problem.n // 2) ** 0.5)))
        if method == "LSODA" and problem.n > DENSE_LIMIT:
            return _too_big(problem, "LSODA")
        if method == "LSODA" and problem.sparse and with_jac:
            return _unavailable("LSODA in solve_ivp takes dense Jacobians only")
        y0 = np.array(prepare_problem(problem).y0)
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                sol = solve_ivp(_capped(problem.f, cap), (0.0, problem.t_end), y0,
                                method=method, rtol=rtol, atol=problem.atol(rtol), **kw)
        except _Timeout:
            return _result("timeout", message=f"no result within {cap:g} s")
        except MemoryError:
            return _unavailable("out of memory")
        counts = dict(nfev=sol.nfev, njev=sol.njev, nlu=sol.nlu, steps=len(sol.t) - 1)
        if not sol.success:
            return _result("failed", message=str(sol.message), **counts)
        return _result("ok", sol.y[:, -1], **counts)
    return run


# --- SciPy odeint (Fortran LSODA) with numba right-hand side and Jacobian ---

def odeint_run(problem: Problem, rtol: float, cap: float) -> dict:
    from scipy.integrate import odeint
    from bench import jitted
    if problem.n > DENSE_LIMIT:
        return _too_big(problem, "odeint")
    f = getattr(jitted, problem.jit + "_f")
    df = getattr(jitted, problem.jit + "_df", None)
    y0 = np.array(prepare_problem(problem).y0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        y, info = odeint(f, y0, [0.0, problem.t_end], args=(problem.p_jit,), Dfun=df,
                         tfirst=True, rtol=rtol, atol=problem.atol(rtol), mxstep=5_000_000,
                         full_output=True)
    counts = dict(nfev=info["nfe"][-1], njev=info["nje"][-1], steps=info["nst"][-1])
    if info["message"] != "Integration successful.":
        return _result("failed", message=info["message"], **counts)
    return _result("ok", y[-1], **counts)


# --- SUNDIALS CVODE (scikit-sundae) with numba right-hand side and Jacobian ---

def _cvode_setup(problem: Problem, rtol: float):
    from bench import jitted
    kw = dict(rtol=rtol, atol=problem.atol(rtol), max_num_steps=10_000_000)
    rhs = getattr(jitted, problem.jit + "_cvrhs")
    if problem.jac is None:
        return rhs, dict(kw, method="Adams", userdata=(problem.p_jit,))
    if problem.sparse:
        from bench.brusselator import sparsity
        pat = sparsity(int(round((problem.n // 2) ** 0.5))).tocsc()
        pat.sort_indices()
        ud = (problem.p_jit, pat.indptr.astype(np.int64), pat.indices.astype(np.int64))
        return rhs, dict(kw, method="BDF", linsolver="sparse", sparsity=pat,
                         jacfn=jitted.bruss_cvjac, userdata=ud)
    return rhs, dict(kw, method="BDF", jacfn=getattr(jitted, problem.jit + "_cvjac"),
                     userdata=(problem.p_jit,))


def cvode_run(problem: Problem, rtol: float, cap: float) -> dict:
    from sksundae.cvode import CVODE
    rhs, kw = _cvode_setup(problem, rtol)
    y0 = np.array(prepare_problem(problem).y0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # notes that our jacfn replaces its own sparse one
        solver = CVODE(rhs, **kw)
    res = solver.solve([0.0, 0.5 * problem.t_end, problem.t_end], y0)
    counts = dict(nfev=getattr(res, "nfev", None), njev=getattr(res, "njev", None))
    if not res.success:
        return _result("failed", message=str(res.message), **counts)
    return _result("ok", res.y[-1], **counts)


def _probe(module: str) -> str:
    try:
        __import__(module)
        return ""
    except Exception as exc:  # any import failure makes the peer unavailable, with its reason
        return f"{type(exc).__name__}: {exc}"


def all_peers() -> list[Peer]:
    """Every solver, in report order, with availability probed once."""
    from engine.integrate import METHODS
    peers = [Peer(f"engine/{m}", "engine", engine_run(m)) for m in METHODS]
    for m in IVP_METHODS:
        peers.append(Peer(f"solve_ivp/{m}", "solve_ivp", ivp_run(m, False)))
        if m in IMPLICIT_IVP:
            peers.append(Peer(f"solve_ivp/{m}+jac", "solve_ivp", ivp_run(m, True)))
    peers.append(Peer("odeint+numba", "odeint", odeint_run))
    peers.append(Peer("cvode+numba", "cvode", cvode_run))
    for peer in peers:
        if peer.family in ("odeint", "cvode"):
            reason = _probe("numba") or _probe("sksundae" if peer.family == "cvode" else "scipy")
            if reason:
                peer.available, peer.reason = False, reason
    return peers


def applicable(peer: Peer, problem: Problem) -> str:
    """Empty if the peer runs on the problem, else why not (recorded, never dropped)."""
    if peer.label.endswith("+jac") and problem.jac is None:
        return "no Jacobian written for this non-stiff problem"
    return ""
