"""The problem library: published test problems, each run through the model language.

Every problem carries its source, its model dict (the project's JSON layout; the
files in examples/models are used where they exist), the span, the tolerance
scaling, the accuracy floor used to count digits, published end values where
known, and hand-written peers' functions (numpy for solve_ivp, numba for odeint
and CVODE). Reference end values are recomputed with SciPy (see
bench/references.py) as an independent second opinion.
"""
from __future__ import annotations

import json
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Optional

import numpy as np

from bench import brusselator as B, handwritten as H

ROOT = Path(__file__).resolve().parent.parent
MODELS = ROOT / "examples" / "models"

# HIRES at t = 321.8122 (Test Set for IVP Solvers, Mazzia & Magherini; values from memory).
HIRES_PUBLISHED = np.array([
    0.7371312573325668e-3, 0.1442485726316185e-3, 0.5888729740967575e-4,
    0.1175651343283149e-2, 0.2386356198831331e-2, 0.6238968252742796e-2,
    0.2849998395185769e-2, 0.2850001604814231e-2])

# Arenstorf orbit: periodic with period T (Hairer, Norsett & Wanner I, sec. II.0; from memory).
ARENSTORF_T = 17.0652165601579625588917206249
ARENSTORF_Y0 = np.array([0.994, 0.0, 0.0, -2.00158510637908252240537862224])


@dataclass
class Problem:
    name: str
    source: str
    model: dict
    t_end: float
    stiff: bool
    atol_scale: float          # atol = atol_scale * rtol for every run
    floor: float               # digits use |y - ref| / (|ref| + floor)
    f: Callable                # numpy f(t, y) (solve_ivp peers)
    jac: Optional[Callable]    # numpy jac(t, y), or None for non-stiff problems
    jit: str                   # prefix of the numba functions in bench.jitted
    p_jit: np.ndarray          # parameters for the numba functions
    published: Optional[np.ndarray] = None
    published_note: str = ""
    sparse: bool = False       # large sparse system (peers use sparse linear algebra)
    limits: dict = field(default_factory=dict)  # engine Limits overrides for prepare
    reference_rtol: float = 1e-12
    n: int = 0
    rtols: Optional[tuple] = None  # tolerances of a full run, when not the default list

    def atol(self, rtol: float) -> float:
        return self.atol_scale * rtol


def _load(name: str) -> dict:
    return json.loads((MODELS / f"{name}.json").read_text())


# Van der Pol in the scaled form of Hairer & Wanner II (eps = 1/mu^2 = 1e-6, t in [0, 2],
# y0 = (2, 0)). examples/models/vanderpol.json is the unscaled form with mu = 1000
# (y2' = mu*(1 - y1^2)*y2 - y1: the same oscillator on a time axis stretched by mu); the
# benchmark uses the scaled form because its published end values are for that form.
VDP_MODEL = {
    "title": "Van der Pol oscillator, scaled stiff form, eps = 1e-6 (Hairer & Wanner II, sec. IV.10)",
    "states": {"y1": 2.0, "y2": 0.0},
    "parameters": {"eps": 1e-6},
    "ddt": {"y1": "y2", "y2": "((1 - y1^2)*y2 - y1)/eps"},
}
# End values at t = 2 (Test Set for IVP Solvers, VDPOL; from memory).
VDP_PUBLISHED = np.array([0.1706167732170483e1, -0.8928097010247975e0])
# Robertson at t = 1e11 (Test Set for IVP Solvers, ROBER; from memory).
ROBERTSON_PUBLISHED = np.array([0.2083340149701255e-7, 0.8333360770334713e-13,
                                0.9999999791665050])

RAMP_MODEL = {
    "title": "Invented example: ramped exchange, non-stiff at first, stiff later",
    "description": ("Invented example: a -> b at rate 1, b -> c at rate k = 10^t that ramps "
                    "from 1 to 1e7 over the span, c -> a at rate 0.1. Conserves a + b + c. "
                    "Explicit steps suit the start; the end is stiff."),
    "states": {"a": 1.0, "b": 0.0, "c": 0.0},
    "ddt": {"a": "-a + 0.1*c", "b": "a - 10^t*b", "c": "10^t*b - 0.1*c"},
}


def _bruss(n: int) -> Problem:
    f, jac = H.bruss_functions(n)
    p = np.concatenate([[n, B.ALPHA * n * n, B.T_SOURCE], 5.0 * B.source_mask(n).ravel()])
    return Problem(
        name=f"brusselator{n}", n=2 * n * n,
        source="2-D Brusselator (Hairer & Wanner, Solving ODEs II, sec. IV.10)",
        model=B.model(n), t_end=B.T_END, stiff=True, atol_scale=1.0, floor=1e-6,
        f=f, jac=jac, jit="bruss", p_jit=p.astype(float), sparse=True,
        limits={"max_states": 40000}, reference_rtol=1e-10 if n <= 64 else 1e-8,
        rtols=(1e-3, 1e-4, 1e-5, 1e-6, 1e-7, 1e-8) if n <= 64 else (1e-3, 1e-4))


def build(name: str) -> Problem:
    """One problem by name (see NAMES)."""
    if name == "robertson":
        return Problem(
            name=name, n=3, source="Robertson 1966; Hairer & Wanner, Solving ODEs II, sec. IV.1",
            model=_load("robertson"), t_end=1e11, stiff=True, atol_scale=1e-4, floor=1e-10,
            f=H.robertson_f, jac=H.robertson_j, jit="robertson",
            p_jit=np.array([0.04, 3e7, 1e4]),
            published=ROBERTSON_PUBLISHED, published_note="Test Set end values (from memory)")
    if name == "hires":
        return Problem(
            name=name, n=8, source="Schaefer 1975; Test Set for IVP Solvers (Mazzia & Magherini)",
            model=_load("hires"), t_end=321.8122, stiff=True, atol_scale=1e-4, floor=1e-7,
            f=H.hires_f, jac=H.hires_j, jit="hires", p_jit=np.array([280.0]),
            published=HIRES_PUBLISHED, published_note="Test Set end values (from memory)")
    if name == "vanderpol":
        return Problem(
            name=name, n=2, source="Van der Pol, eps = 1e-6 i.e. mu = 1000 (Hairer & Wanner II, "
                                   "sec. IV.10; Test Set VDPOL)",
            model=VDP_MODEL, t_end=2.0, stiff=True, atol_scale=1e-2, floor=1e-6,
            f=H.vanderpol_f, jac=H.vanderpol_j, jit="vanderpol", p_jit=np.array([1e-6]),
            published=VDP_PUBLISHED, published_note="Test Set VDPOL end values (from memory)")
    if name == "arenstorf":
        return Problem(
            name=name, n=4, source="Arenstorf orbit (Hairer, Norsett & Wanner, Solving ODEs I, sec. II.0)",
            model=_load("arenstorf"), t_end=ARENSTORF_T, stiff=False, atol_scale=1e-3, floor=1.0,
            f=H.arenstorf_f, jac=None, jit="arenstorf", p_jit=np.array([0.012277471]),
            published=ARENSTORF_Y0, published_note="periodic: end state = start state (from memory)")
    if name == "lorenz":
        return Problem(
            name=name, n=3, source="Lorenz 1963 (sigma 10, rho 28, beta 8/3), t in [0, 10]",
            model=_load("lorenz"), t_end=10.0, stiff=False, atol_scale=1e-3, floor=1e-3,
            f=H.lorenz_f, jac=None, jit="lorenz", p_jit=np.array([10.0, 28.0, 8.0 / 3.0]),
            published_note="chaotic; SciPy reference only")
    if name == "ramp":
        return Problem(
            name=name, n=3, source="invented: non-stiff at first, stiff later",
            model=RAMP_MODEL, t_end=7.0, stiff=True, atol_scale=1e-4, floor=1e-8,
            f=H.ramp_f, jac=H.ramp_j, jit="ramp", p_jit=np.zeros(1))
    if name.startswith("brusselator"):
        return _bruss(int(name[len("brusselator"):]))
    raise KeyError(f"unknown problem '{name}'; choose one of {', '.join(NAMES)}")


NAMES = ("robertson", "hires", "vanderpol", "brusselator32", "brusselator128",
         "arenstorf", "lorenz", "ramp")
QUICK = ("robertson", "hires", "vanderpol")
SMALL_STIFF = ("robertson", "hires", "vanderpol")
NON_STIFF = ("arenstorf", "lorenz")


_PREPARED: dict = {}
MACHINE_CODE: dict = {}


def prepare_problem(problem: Problem):
    """The engine's PreparedModel for ``problem``, kept per problem object, with its
    machine code when the engine builds one (as a worker does for batches and repeated
    models; the build time is in ``machine_code_info``, not in any timed run).

    Kept here (not only in prepare's content-hash cache) because hashing a large
    model's JSON on every call would be charged to the solver being timed.
    """
    from engine.kernels import native
    from engine.language.limits import Limits
    from engine.model import prepare
    key = id(problem)
    hit = _PREPARED.get(key)
    if hit is None or hit[0] is not problem:
        started = time.perf_counter()
        pm = prepare(problem.model, Limits(**problem.limits) if problem.limits else None)
        pm, info = native.choose(pm, native.ALWAYS)
        info["prepare_seconds"] = time.perf_counter() - started
        hit = _PREPARED[key] = (problem, pm)
        MACHINE_CODE[problem.name] = info
    return hit[1]


def machine_code_info(problem: Problem) -> dict:
    """Whether ``problem``'s engine model runs as machine code, and its build time."""
    prepare_problem(problem)
    return MACHINE_CODE[problem.name]
