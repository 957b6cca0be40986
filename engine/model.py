"""Model objects in, compiled kernels out: ``check_model`` and ``prepare``.

``prepare`` reads the JSON model layout (documented in docs/model-language.md),
parses every expression into one shared tree, adds mass-action terms of the
reactions, differentiates exactly, compiles the register programs and finds
conservation laws. Results are cached by the SHA-256 of the model's canonical
JSON, so a sweep over parameters prepares a model once.
"""
from __future__ import annotations

import hashlib
import json
import math
import threading
import time
from collections import OrderedDict
from dataclasses import dataclass, field

import numpy as np

from engine import vm
from engine.derivative import jacobian
from engine.expr import Builder, ExprError, Node
from engine.limits import DEFAULT_LIMITS, Limits
from engine.program import ConstPool, compile_program
from engine.reactions import conservation_laws, law_label, stoichiometry
from engine.names import name_problem, suggest
from engine.reactions import read_reactions
from engine.expr import parse


@dataclass(frozen=True)
class ModelIssue:
    """One problem, located by ``path`` inside the model object (e.g. ("ddt", "A"))."""

    path: tuple
    message: str
    position: int | None = None
    suggestion: str | None = None

    def text(self) -> str:
        head = f"position {self.position}: " if self.position is not None else ""
        tail = f"; {self.suggestion}" if self.suggestion else ""
        return head + self.message + tail


class ModelError(ValueError):
    """Raised by :func:`prepare` with every issue found."""

    def __init__(self, issues: list[ModelIssue]):
        self.issues = list(issues)
        super().__init__("; ".join("/".join(map(str, i.path)) + ": " + i.text() for i in self.issues[:5]))


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
                elif not _is_number(value):
                    issues.append(ModelIssue((section, name), "value must be a finite number"))
                else:
                    target[index[name]] = float(value)
        if issues:
            raise ModelError(issues)
        return p, y0

    def summary(self) -> dict:
        """JSON-safe description: counts, stoichiometric matrix, conservation laws."""
        k = self.kernel
        S = self.stoichiometry
        out = {
            "title": self.title, "content_hash": self.content_hash,
            "counts": {"states": k.n, "parameters": len(self.param_names),
                       "derived": k.n_aux, "events": k.n_events,
                       "reactions": len(self.reaction_names),
                       "jacobian_nonzeros": int(len(k.jac_rows))},
            "instructions": {"rhs": int(len(k.rhs_code)), "jacobian": int(len(k.jac_code)),
                             "derived": int(len(k.aux_code)), "events": int(len(k.event_code)),
                             "registers": int(k.n_regs), "constants": int(len(k.consts))},
            "states": list(self.state_names), "parameters": list(self.param_names),
            "derived": list(self.aux_names), "events": list(self.event_names),
            "reactions": list(self.reaction_names),
            "conservation_laws": [{"label": lab, "coefficients": [float(c) for c in row]}
                                  for lab, row in zip(self.conservation_labels, self.conservation)],
            "prepare_seconds": self.prepare_seconds,
        }
        rows, cols = np.nonzero(S)
        out["stoichiometry"] = {"rows": "states", "columns": "reactions",
                                "entries": [[int(i), int(j), float(S[i, j])] for i, j in zip(rows, cols)]}
        return out


def _is_number(v) -> bool:
    """A finite float64 value (bools and integers beyond the float range are not)."""
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        return False
    try:
        return math.isfinite(float(v))
    except OverflowError:
        return False


def check_model(model, limits: Limits | None = None) -> list[ModelIssue]:
    """Every problem in ``model`` (empty list if it is valid). Never raises on bad input."""
    limits = limits or DEFAULT_LIMITS
    try:
        spec, issues = read_model(model, limits)
    except RecursionError:
        return [ModelIssue((), "model is nested too deeply")]
    return [ModelIssue(*i) for i in issues]


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


_CACHE: OrderedDict = OrderedDict()
_CACHE_LOCK = threading.Lock()
CACHE_SIZE = 256


def content_hash(model) -> str | None:
    try:
        text = json.dumps(model, sort_keys=True, separators=(",", ":"), allow_nan=False)
    except (TypeError, ValueError, RecursionError):
        return None
    return hashlib.sha256(text.encode()).hexdigest()


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
                return hit
    started = time.perf_counter()
    spec, issues = read_model(model, limits)
    if issues:
        raise ModelError([ModelIssue(*i) for i in issues])
    prepared = _compile(spec, limits, digest or "", started)
    if digest is not None:
        with _CACHE_LOCK:
            _CACHE[key] = prepared
            while len(_CACHE) > CACHE_SIZE:
                _CACHE.popitem(last=False)
    return prepared


def _frozen(a) -> np.ndarray:
    a = np.ascontiguousarray(a)
    a.setflags(write=False)
    return a


def _mass_action_arrays(spec, S: np.ndarray, pool: ConstPool):
    """Parts of the packed ``Kernel.ma`` array (see engine.vm.mass_action), the
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
    live = ~np.array(spec.fixed, dtype=bool)
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



# ---------------------------------------------------------------------------
# Reading the JSON layout into trees (the front end shared by check and prepare)

TOP_KEYS = ("title", "description", "states", "parameters", "derived", "ddt", "reactions", "events")
STATE_KEYS = ("initial", "unit", "nonnegative", "fixed", "description")
PARAM_KEYS = ("value", "unit", "description")
REACTION_KEYS = ("name", "equation", "k", "k_reverse", "arrhenius", "rate", "description")
ARRHENIUS_KEYS = ("A", "n", "Ea", "Ea_unit", "T")
EVENT_KEYS = ("name", "when", "direction", "stop", "description")
DIRECTIONS = {"rising": 1, "falling": -1, "both": 0}


class _TooMany(Exception):
    pass


@dataclass
class _Spec:
    builder: Builder
    title: str = ""
    state_names: list = field(default_factory=list)
    y0: list = field(default_factory=list)
    nonnegative: list = field(default_factory=list)
    fixed: list = field(default_factory=list)
    units: dict = field(default_factory=dict)
    param_names: list = field(default_factory=list)
    p: list = field(default_factory=list)
    scope: dict = field(default_factory=dict)
    aux_names: list = field(default_factory=list)
    aux: list = field(default_factory=list)
    ddt: dict = field(default_factory=dict)
    equations: list = field(default_factory=list)
    rates: list = field(default_factory=list)
    structure: list = field(default_factory=list)  # (k_f, reactants, k_r | None, products)
    reaction_names: list = field(default_factory=list)
    event_names: list = field(default_factory=list)
    events: list = field(default_factory=list)
    event_directions: list = field(default_factory=list)
    event_terminal: list = field(default_factory=list)
    rhs: list = field(default_factory=list)
    ddt_terms: dict = field(default_factory=dict)  # state index -> own ddt node (non-zero)
    law_states: list = field(default_factory=list)


class _Reader:
    def __init__(self, limits: Limits):
        self.limits = limits
        self.issues: list[tuple] = []
        self.spec = _Spec(Builder(strict=True, max_exponent=limits.max_exponent))

    def issue(self, path, message, position=None, suggestion=None):
        self.issues.append((tuple(path), message, position, suggestion))
        if len(self.issues) >= self.limits.max_issues:
            raise _TooMany

    def keys(self, obj, allowed, path) -> bool:
        if not isinstance(obj, dict):
            self.issue(path, "must be an object")
            return False
        for k in obj:
            if k not in allowed:
                self.issue((*path, k), f"unknown key '{k}'; allowed keys are {', '.join(allowed)}",
                           None, suggest(str(k), allowed))
        return True

    def number(self, value, path, default=None):
        if value is None and default is not None:
            return default
        if not _is_number(value):
            self.issue(path, "must be a finite number")
            return None
        return float(value)

    def flag(self, value, path) -> bool:
        if value is None:
            return False
        if not isinstance(value, bool):
            self.issue(path, "must be true or false")
            return False
        return value

    def text(self, value, path, max_len=200):
        if value is None:
            return ""
        if not isinstance(value, str) or len(value) > max_len:
            self.issue(path, f"must be a string of at most {max_len} characters")
            return ""
        return value

    def expr(self, value, path, explain=None) -> Node | None:
        b = self.spec.builder
        if _is_number(value):
            return b.const(float(value))
        if not isinstance(value, str):
            self.issue(path, "must be an expression (a string) or a finite number")
            return None
        try:
            return parse(value, self.spec.scope, b, self.limits, explain)
        except ExprError as err:
            self.issue(path, err.message, err.position, err.suggestion)
            return None

    def new_name(self, name, path) -> bool:
        problem = name_problem(name, self.limits.max_name_length)
        if problem is None and name in self.spec.scope:
            problem = f"'{name}' is already defined"
        if problem:
            self.issue(path, problem)
        return problem is None

    def section(self, model, key, kind, limit):
        value = model.get(key, {} if kind is dict else [])
        if not isinstance(value, kind):
            self.issue((key,), "must be an object" if kind is dict else "must be a list")
            return {} if kind is dict else []
        if len(value) > limit:
            self.issue((key,), f"has {len(value)} entries; the limit is {limit}")
            return {} if kind is dict else []
        return value


def _read_states(r: _Reader, model):
    spec, b = r.spec, r.spec.builder
    states = r.section(model, "states", dict, r.limits.max_states)
    if isinstance(model.get("states"), dict) and not model["states"]:
        r.issue(("states",), "declare at least one state")
    for name, v in states.items():
        path = ("states", name)
        if not r.new_name(name, path):
            continue
        init, nonneg, fixed, unit = 0.0, False, False, ""
        if isinstance(v, dict):
            r.keys(v, STATE_KEYS, path)
            init = r.number(v.get("initial"), (*path, "initial"), 0.0)
            nonneg = r.flag(v.get("nonnegative"), (*path, "nonnegative"))
            fixed = r.flag(v.get("fixed"), (*path, "fixed"))
            unit = r.text(v.get("unit"), (*path, "unit"), 32)
            r.text(v.get("description"), (*path, "description"))
        else:
            init = r.number(v, path)
        spec.scope[name] = b.var("y", len(spec.state_names), name)
        spec.state_names.append(name)
        spec.y0.append(init if init is not None else 0.0)
        spec.nonnegative.append(nonneg)
        spec.fixed.append(fixed)
        if unit:
            spec.units[name] = unit


def _read_parameters(r: _Reader, model):
    spec, b = r.spec, r.spec.builder
    for name, v in r.section(model, "parameters", dict, r.limits.max_parameters).items():
        path = ("parameters", name)
        if not r.new_name(name, path):
            continue
        if isinstance(v, dict):
            r.keys(v, PARAM_KEYS, path)
            if "value" not in v:
                r.issue((*path, "value"), "is required")
            value = r.number(v.get("value"), (*path, "value"))
            unit = r.text(v.get("unit"), (*path, "unit"), 32)
            r.text(v.get("description"), (*path, "description"))
            if unit:
                spec.units[name] = unit
        else:
            value = r.number(v, path)
        spec.scope[name] = b.var("p", len(spec.param_names), name)
        spec.param_names.append(name)
        spec.p.append(value if value is not None else 0.0)


def _read_derived(r: _Reader, model):
    spec = r.spec
    derived = r.section(model, "derived", dict, r.limits.max_derived)
    later = {name: f"'{name}' is defined later in derived; a derived quantity may use only "
                   "the ones listed before it" for name in derived if isinstance(name, str)}
    for name, text in derived.items():
        path = ("derived", name)
        later.pop(name, None)
        if not r.new_name(name, path):
            continue
        node = r.expr(text, path, later)
        if node is None:
            node = spec.builder.zero  # keep checking later expressions that use it
        spec.scope[name] = node
        spec.aux_names.append(name)
        spec.aux.append(node)


def _read_ddt(r: _Reader, model):
    spec = r.spec
    index = {n: i for i, n in enumerate(spec.state_names)}
    for name, text in r.section(model, "ddt", dict, r.limits.max_states).items():
        path = ("ddt", name)
        if name not in index:
            r.issue(path, f"'{name}' is not a state; ddt keys must be declared in states",
                    None, suggest(str(name), spec.state_names))
            continue
        if spec.fixed[index[name]]:
            r.issue(path, f"state '{name}' is fixed (held constant); remove its ddt or 'fixed'")
            continue
        node = r.expr(text, path)
        if node is not None:
            spec.ddt[index[name]] = node


def _read_events(r: _Reader, model):
    spec = r.spec
    for k, ev in enumerate(r.section(model, "events", list, r.limits.max_events)):
        path = ("events", k)
        if not r.keys(ev, EVENT_KEYS, path):
            continue
        name = ev.get("name", f"event{k + 1}")
        problem = name_problem(name, r.limits.max_name_length)
        if problem or name in spec.event_names:
            r.issue((*path, "name"), problem or f"event name '{name}' is used twice")
        if "when" not in ev:
            r.issue((*path, "when"), "is required: an expression whose zero crossing is the event")
        node = r.expr(ev.get("when"), (*path, "when")) if "when" in ev else None
        direction = ev.get("direction", "both")
        if direction not in DIRECTIONS:
            r.issue((*path, "direction"), "must be 'rising', 'falling' or 'both'")
            direction = "both"
        stop = r.flag(ev.get("stop"), (*path, "stop"))
        r.text(ev.get("description"), (*path, "description"))
        spec.event_names.append(str(name))
        spec.events.append(node if node is not None else spec.builder.zero)
        spec.event_directions.append(DIRECTIONS[direction])
        spec.event_terminal.append(stop)


def _assemble(spec: _Spec):
    """rhs_i = ddt_i + sum_j S_ij r_j; fixed states have zero derivative."""
    b = spec.builder
    terms: list[list] = [[] for _ in spec.state_names]
    index = {n: i for i, n in enumerate(spec.state_names)}
    in_reaction = set()
    for eq, rate in zip(spec.equations, spec.rates):
        net: dict[int, float] = {}
        for sign, side in ((-1, eq.reactants), (1, eq.products)):
            for name, coef in side:
                i = index[name]
                in_reaction.add(i)
                net[i] = net.get(i, 0.0) + sign * float(coef)
        for i, c in net.items():
            if c != 0.0 and not spec.fixed[i]:
                terms[i].append(b.mul(b.const(c), rate))
    for i in range(len(spec.state_names)):
        acc = spec.ddt.get(i, b.zero)
        for term in terms[i]:
            acc = b.add(acc, term)
        spec.rhs.append(acc if not spec.fixed[i] else b.zero)
        own = spec.ddt.get(i, b.zero)
        if own is not b.zero and not spec.fixed[i]:
            spec.ddt_terms[i] = own
    spec.law_states = sorted(i for i in in_reaction
                             if not spec.fixed[i] and spec.ddt.get(i, b.zero) is b.zero)


def read_model(model, limits: Limits):
    """(spec, issues); issues are (path, message, position, suggestion) tuples."""
    r = _Reader(limits)
    try:
        if not r.keys(model, TOP_KEYS, ()):
            return None, r.issues
        if "states" not in model:
            r.issue(("states",), "is required: declare at least one state")
        r.spec.title = r.text(model.get("title"), ("title",))
        r.text(model.get("description"), ("description",), 2000)
        _read_states(r, model)
        _read_parameters(r, model)
        _read_derived(r, model)
        _read_ddt(r, model)
        read_reactions(r, model)
        _read_events(r, model)
    except _TooMany:
        return None, r.issues
    if r.issues:
        return None, r.issues
    _assemble(r.spec)
    return r.spec, r.issues


__all__ = ["ModelError", "ModelIssue", "PreparedModel", "ParameterJacobian", "check_model", "prepare",
           "parameter_jacobian", "content_hash"]
