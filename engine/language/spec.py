"""Reading the JSON model layout into expression trees: the front end shared by
``engine.model.check_model`` and ``engine.model.prepare``.

Every problem is collected as ``(path, message, position, suggestion)`` with the
path inside the model object; reading goes on after a problem so one submission
reports them all (up to ``Limits.max_issues``).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

from engine.language.expr import Builder, ExprError, Node
from engine.language.limits import Limits
from engine.language.names import name_problem, suggest
from engine.language.parser import parse
from engine.language.reactions import read_reactions


def is_number(v) -> bool:
    """A finite float64 value (bools and integers beyond the float range are not)."""
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        return False
    try:
        return math.isfinite(float(v))
    except OverflowError:
        return False


TOP_KEYS = ("title", "description", "states", "parameters", "derived", "ddt", "reactions", "events")
STATE_KEYS = ("initial", "unit", "nonnegative", "clamped", "description")
PARAM_KEYS = ("value", "unit", "description")
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
    clamped: list = field(default_factory=list)
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
        if not is_number(value):
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
        if is_number(value):
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
        init, nonneg, clamped, unit = 0.0, False, False, ""
        if isinstance(v, dict):
            r.keys(v, STATE_KEYS, path)
            init = r.number(v.get("initial"), (*path, "initial"), 0.0)
            nonneg = r.flag(v.get("nonnegative"), (*path, "nonnegative"))
            clamped = r.flag(v.get("clamped"), (*path, "clamped"))
            unit = r.text(v.get("unit"), (*path, "unit"), 32)
            r.text(v.get("description"), (*path, "description"))
        else:
            init = r.number(v, path)
        spec.scope[name] = b.var("y", len(spec.state_names), name)
        spec.state_names.append(name)
        spec.y0.append(init if init is not None else 0.0)
        spec.nonnegative.append(nonneg)
        spec.clamped.append(clamped)
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
        if spec.clamped[index[name]]:
            r.issue(path, f"state '{name}' is clamped (held constant); remove its ddt or 'clamped'")
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
        if not isinstance(direction, str) or direction not in DIRECTIONS:
            r.issue((*path, "direction"), "must be 'rising', 'falling' or 'both'")
            direction = "both"
        stop = r.flag(ev.get("stop"), (*path, "stop"))
        r.text(ev.get("description"), (*path, "description"))
        spec.event_names.append(str(name))
        spec.events.append(node if node is not None else spec.builder.zero)
        spec.event_directions.append(DIRECTIONS[direction])
        spec.event_terminal.append(stop)


def _assemble(spec: _Spec):
    """rhs_i = ddt_i + sum_j S_ij r_j; clamped states have zero derivative."""
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
            if c != 0.0 and not spec.clamped[i]:
                terms[i].append(b.mul(b.const(c), rate))
    for i in range(len(spec.state_names)):
        acc = spec.ddt.get(i, b.zero)
        for term in terms[i]:
            acc = b.add(acc, term)
        spec.rhs.append(acc if not spec.clamped[i] else b.zero)
        own = spec.ddt.get(i, b.zero)
        if own is not b.zero and not spec.clamped[i]:
            spec.ddt_terms[i] = own
    spec.law_states = sorted(i for i in in_reaction
                             if not spec.clamped[i] and spec.ddt.get(i, b.zero) is b.zero)


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
