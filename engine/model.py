"""Model objects in, compiled kernels out: ``check_model`` and ``prepare``.

``prepare`` reads the JSON model layout (documented in docs/model-language.md),
parses every expression into one shared tree, adds mass-action terms of the
reactions, differentiates exactly, compiles the register programs and finds
conservation laws. Results are cached by the SHA-256 of the model's canonical
JSON, so a sweep over parameters prepares a model once.
"""
from __future__ import annotations

import os
import threading
import time
from collections import OrderedDict
from dataclasses import dataclass, field

import numpy as np

from engine.kernels import vm
from engine.language.check import (ModelError, ModelIssue, check_model, content_hash, facts,
                                    read_checked)
from engine.language.derivative import jacobian
from engine.language.expr import Builder, Node
from engine.language.limits import DEFAULT_LIMITS, Limits
from engine.kernels.program import ConstPool, compile_program
from engine.language.reactions import conservation_laws, law_label, stoichiometry
from engine.language.names import suggest
from engine.language.spec import is_number, read_model


@dataclass(frozen=True, eq=False)
class PreparedModel:
    kernel: vm.Kernel
    state_names: tuple
    y0: np.ndarray
    param_names: tuple
    p: np.ndarray
    aux_names: tuple
    event_names: tuple
    event_directions: np.ndarray
    event_terminal: np.ndarray
    nonnegative: np.ndarray
    stoichiometry: np.ndarray
    reaction_names: tuple
    conservation: np.ndarray
    conservation_labels: tuple
    content_hash: str
    prepare_seconds: float
    title: str = ""
    units: dict = field(default_factory=dict)

    def with_overrides(self, params: dict | None = None, initial: dict | None = None):
        """(p, y0) with the named values replaced; unknown names raise ModelError."""
        p, y0 = self.p.copy(), self.y0.copy()
        issues = []
        for section, values, names, target in (("parameters", params, self.param_names, p),
                                               ("initial", initial, self.state_names, y0)):
            index = {n: i for i, n in enumerate(names)}
            for name, value in (values or {}).items():
                if name not in index:
                    issues.append(ModelIssue((section, name), f"unknown name '{name}'",
                                             None, suggest(str(name), names)))
                elif not is_number(value):
                    issues.append(ModelIssue((section, name), "value must be a finite number"))
                else:
                    target[index[name]] = float(value)
        if issues:
            raise ModelError(issues)
        return p, y0

    def summary(self) -> dict:
        """JSON-safe description: counts, stoichiometric matrix, conservation laws, and the
        sizes of the compiled programs."""
        k = self.kernel
        out = facts(self, self.stoichiometry, self.conservation, len(k.jac_rows), self.content_hash)
        out["counts"]["derived"], out["counts"]["events"] = k.n_aux, k.n_events
        out["instructions"] = {"rhs": int(len(k.rhs_code)), "jacobian": int(len(k.jac_code)),
                               "derived": int(len(k.aux_code)), "events": int(len(k.event_code)),
                               "registers": int(k.n_regs), "constants": int(len(k.consts))}
        out["prepare_seconds"] = self.prepare_seconds
        return out


def parameter_jacobian(model, limits: Limits | None = None) -> "ParameterJacobian":
    """d(rhs)/d(parameters) of ``model``, exact, as a compiled program (for sensitivities)."""
    spec, issues = read_model(model, limits or DEFAULT_LIMITS)
    if issues:
        raise ModelError([ModelIssue(*i) for i in issues])
    spec.builder.strict = False
    entries = jacobian(spec.builder, spec.rhs, "p")
    pool = ConstPool()
    code, n_regs = compile_program([(k, e[2]) for k, e in enumerate(entries)], pool)
    return ParameterJacobian(np.array([e[0] for e in entries], dtype=np.int64),
                             np.array([e[1] for e in entries], dtype=np.int64),
                             code, pool.array(), n_regs, len(spec.state_names), len(spec.param_names))


@dataclass(frozen=True, eq=False)
class ParameterJacobian:
    rows: np.ndarray   # state index of each nonzero
    cols: np.ndarray   # parameter index of each nonzero
    code: np.ndarray
    consts: np.ndarray
    n_regs: int
    n_states: int
    n_params: int

    def dense(self, t: float, y, p) -> np.ndarray:
        vals = np.zeros(len(self.rows))
        vm.run(self.code, self.consts, float(t), np.asarray(y, dtype=float),
               np.asarray(p, dtype=float), np.zeros(self.n_regs), vals)
        out = np.zeros((self.n_states, self.n_params))
        out[self.rows, self.cols] = vals
        return out


_CACHE: OrderedDict = OrderedDict()  # (digest, limits) -> (PreparedModel, bytes)
_CACHE_LOCK = threading.Lock()
CACHE_SIZE = 256  # models at most
# bytes of arrays held by cached models at most (STIFFLANE_PREPARE_CACHE_MB, default 256);
# a model larger than a quarter of it is not kept
CACHE_BYTES = int(float(os.environ.get("STIFFLANE_PREPARE_CACHE_MB", "256")) * 2**20)
_cache_bytes = [0]


def footprint(prepared: "PreparedModel") -> int:
    """Bytes of the arrays a prepared model holds (its kernel's programs included)."""
    arrays = [v for v in vars(prepared).values() if isinstance(v, np.ndarray)]
    arrays += [v for v in prepared.kernel if isinstance(v, np.ndarray)]
    return sum(a.nbytes for a in arrays) + 1024 * (len(prepared.state_names) + len(prepared.param_names))


def _remember(key, prepared: "PreparedModel") -> None:
    size = footprint(prepared)
    if size > CACHE_BYTES // 4:
        return
    with _CACHE_LOCK:
        if key in _CACHE:
            return
        _CACHE[key] = (prepared, size)
        _cache_bytes[0] += size
        while len(_CACHE) > CACHE_SIZE or _cache_bytes[0] > CACHE_BYTES:
            _, (_, dropped) = _CACHE.popitem(last=False)
            _cache_bytes[0] -= dropped


def clear_cache() -> None:
    with _CACHE_LOCK:
        _CACHE.clear()
        _cache_bytes[0] = 0


def cache_usage() -> tuple[int, int]:
    """(models, bytes) held by the prepare cache."""
    with _CACHE_LOCK:
        return len(_CACHE), _cache_bytes[0]


def prepare(model, limits: Limits | None = None) -> PreparedModel:
    """Compile ``model`` into a :class:`PreparedModel`; raises :class:`ModelError`."""
    limits = limits or DEFAULT_LIMITS
    digest = content_hash(model)
    key = (digest, limits)
    if digest is not None:
        with _CACHE_LOCK:
            hit = _CACHE.get(key)
            if hit is not None:
                _CACHE.move_to_end(key)
                return hit[0]
    started = time.perf_counter()
    spec, _ = read_checked(model, limits)  # sizes are checked before any derivative work
    prepared = _compile(spec, limits, digest or "", started)
    if digest is not None:
        _remember(key, prepared)
    return prepared


def _frozen(a) -> np.ndarray:
    a = np.ascontiguousarray(a)
    a.setflags(write=False)
    return a


def _mass_action_arrays(spec, S: np.ndarray, pool: ConstPool):
    """Parts of the packed ``Kernel.ma`` array (see engine.kernels.vm.mass_action), the
    stoichiometric values to append to the constants, and the rate constants to pin."""
    index = {name: i for i, name in enumerate(spec.state_names)}
    pinned: list[tuple[int, Node]] = []
    slots: dict[int, int] = {}

    def source(node):
        if node is None:
            return vm.K_NONE, 0
        if node.op == "p":
            return vm.K_PARAM, node.value
        if node.op == "const":
            return vm.K_CONST, pool(node.value)
        if id(node) not in slots:
            slots[id(node)] = len(pinned)
            pinned.append((len(pinned), node))
        return vm.K_REG, slots[id(node)]

    m = len(spec.structure)
    K = np.zeros((m, 4), dtype=np.int64)
    lists = {"react": [], "prod": [], "stoich": []}
    ptrs = {key: [0] for key in lists}
    values: list[float] = []
    live = ~np.array(spec.clamped, dtype=bool)
    for j, (kf, react, kr, prod) in enumerate(spec.structure):
        K[j] = (*source(kf), *source(kr))
        for key, side in (("react", react), ("prod", prod)):
            lists[key].extend(index[name] for name, c in side for _ in range(int(c)))
            ptrs[key].append(len(lists[key]))
        rows = np.flatnonzero((S[:, j] != 0) & live)
        lists["stoich"].extend(rows.tolist())
        values.extend(S[rows, j].tolist())
        ptrs["stoich"].append(len(lists["stoich"]))
    return K, lists, ptrs, np.array(values, dtype=float), pinned


def _pack_mass_action(K, lists, ptrs, v0: int, reg_base: int) -> np.ndarray:
    m = K.shape[0]
    K = K.copy()
    for col in (0, 2):
        K[K[:, col] == vm.K_REG, col + 1] += reg_base
    start = 2 + 7 * m + 3  # header, K, three pointer arrays
    ma = [m, v0, *K.ravel().tolist()]
    offset = start
    for key in ("react", "prod", "stoich"):
        ma.extend(offset + q for q in ptrs[key])
        offset += len(lists[key])
    for key in ("react", "prod", "stoich"):
        ma.extend(lists[key])
    return np.array(ma, dtype=np.int64)


def _compile(spec, limits: Limits, digest: str, started: float) -> PreparedModel:
    b: Builder = spec.builder
    b.strict = False
    n = len(spec.state_names)
    S, exact = stoichiometry(spec.equations, {s: i for i, s in enumerate(spec.state_names)}, n)
    entries = jacobian(b, spec.rhs, "y")
    pool = ConstPool()
    ma, stoich_values = np.zeros(2, dtype=np.int64), np.zeros(0)
    if spec.structure:  # reactions run structurally; the program adds the ddt terms
        K, lists, ptrs, stoich_values, pinned = _mass_action_arrays(spec, S, pool)
        rhs_code, rhs_regs = compile_program(sorted(spec.ddt_terms.items()), pool, pinned)
        ma = (K, lists, ptrs, rhs_regs - len(pinned))
    else:
        rhs_code, rhs_regs = compile_program(list(enumerate(spec.rhs)), pool)
    programs = [
        (rhs_code, rhs_regs),
        compile_program([(k, e[2]) for k, e in enumerate(entries)], pool),
        compile_program(list(enumerate(spec.aux)), pool),
        compile_program(list(enumerate(spec.events)), pool),
    ]
    total = sum(len(c) for c, _ in programs)
    if total > limits.max_instructions:
        raise ModelError([ModelIssue((), f"the compiled model needs {total} instructions; "
                                         f"the limit is {limits.max_instructions}")])
    consts = pool.array()
    if spec.structure:
        ma = _pack_mass_action(*ma[:3], v0=len(consts), reg_base=ma[3])
        consts = np.concatenate([consts, stoich_values])
    kernel = vm.Kernel(
        n=n, n_regs=max(r for _, r in programs), consts=_frozen(consts),
        rhs_code=_frozen(programs[0][0]), jac_code=_frozen(programs[1][0]),
        jac_rows=_frozen(np.array([e[0] for e in entries], dtype=np.int64)),
        jac_cols=_frozen(np.array([e[1] for e in entries], dtype=np.int64)),
        aux_code=_frozen(programs[2][0]), n_aux=len(spec.aux),
        event_code=_frozen(programs[3][0]), n_events=len(spec.events), ma=_frozen(ma),
    )
    laws = conservation_laws(S, exact, spec.law_states)
    return PreparedModel(
        kernel=kernel, state_names=tuple(spec.state_names), y0=_frozen(spec.y0),
        param_names=tuple(spec.param_names), p=_frozen(spec.p), aux_names=tuple(spec.aux_names),
        event_names=tuple(spec.event_names),
        event_directions=_frozen(np.array(spec.event_directions, dtype=np.int64)),
        event_terminal=_frozen(np.array(spec.event_terminal, dtype=bool)),
        nonnegative=_frozen(np.array(spec.nonnegative, dtype=bool)),
        stoichiometry=_frozen(S), reaction_names=tuple(spec.reaction_names),
        conservation=_frozen(laws.reshape(-1, n)),
        conservation_labels=tuple(law_label(r, spec.state_names) for r in laws),
        content_hash=digest, prepare_seconds=time.perf_counter() - started,
        title=spec.title, units=dict(spec.units),
    )


__all__ = ["ModelError", "ModelIssue", "PreparedModel", "ParameterJacobian", "check_model", "prepare",
           "parameter_jacobian", "content_hash"]
