"""Forward sensitivities dy/dθ of a model's states to parameters and initial values.

For each chosen θ_j the sensitivity s_j = dy/dθ_j obeys the linear equations

    s_j' = J(t, y) s_j + ∂f/∂θ_j,    s_j(t0) = ∂y0/∂θ_j

(Hairer, Nørsett & Wanner I, sec. I.14: ∂f/∂θ_j = 0 and s_j(t0) = e_k for the initial
value of state k). They are written here as expression trees on the model's own shared
tree - J and ∂f/∂p from the same exact differentiation the Jacobian uses - and appended
to the states, so one augmented model is prepared and integrated like any other: every
method, both tiers (interpreter and machine code), events, the sparse path and the
stiffness switching apply unchanged, and the augmented Jacobian (block lower triangular,
J on its diagonal blocks) is exact, second derivatives included. The sensitivities share
the states' step-size control by default; with ``error_control=False`` they are carried
along without steering the step (their weights in the error norm vanish).

Pure functions and frozen data; no service or queue imports.
"""
from __future__ import annotations

import dataclasses
import hashlib
import math
import threading
import time
from collections import OrderedDict
from dataclasses import dataclass

import numpy as np

from engine.language.check import ModelError, ModelIssue, content_hash, read_checked
from engine.language.derivative import jacobian
from engine.language.limits import DEFAULT_LIMITS, Limits
from engine.language.names import suggest
from engine.model import PreparedModel, _compile, prepare

INITIAL_PREFIX = "init:"  # the label of an initial value among the sensitivity parameters
# sizes of the augmented system n * (1 + m), at most (its Jacobian is checked like any model's)
MAX_AUGMENTED_STATES = 20_000
_OFF_WEIGHT = 1e300  # absolute tolerance that takes a component out of the error norm


@dataclass(frozen=True, eq=False)
class SensitiveModel:
    """A model and its augmented system [y, s_1, ..., s_m] (s_j = dy/dθ_j, n values each)."""
    base: PreparedModel
    augmented: PreparedModel
    wrt: tuple          # labels: a parameter's name, or "init:<state>"
    param_index: tuple  # per label: the parameter's index, or -1
    state_index: tuple  # per label: the state whose initial value it is, or -1

    @property
    def n(self) -> int:
        return len(self.base.state_names)

    def initial_state(self, y0: np.ndarray) -> np.ndarray:
        """[y0, s_1(t0), ..., s_m(t0)]: zero for parameters, a unit vector for initial values."""
        n, m = self.n, len(self.wrt)
        out = np.zeros(n * (1 + m))
        out[:n] = y0
        for j, k in enumerate(self.state_index):
            if k >= 0:
                out[n * (1 + j) + k] = 1.0
        return out

    def values(self, p: np.ndarray, y0: np.ndarray) -> np.ndarray:
        """θ_j for each label (the parameter's value or the state's initial value)."""
        return np.array([p[i] if i >= 0 else y0[k] for i, k in zip(self.param_index, self.state_index)])

    def atol(self, atol, p: np.ndarray, y0: np.ndarray, error_control: bool = True) -> np.ndarray:
        """Absolute tolerances of the augmented states. A sensitivity has the states' unit
        divided by θ's, so its tolerance is the state's divided by |θ_j| (1 where θ_j = 0)
        - common practice for forward sensitivities; without error control it is so large
        that the sensitivities do not steer the step."""
        n, m = self.n, len(self.wrt)
        base = np.broadcast_to(np.asarray(atol, dtype=float), (n,))
        out = np.empty(n * (1 + m))
        out[:n] = base
        for j, theta in enumerate(self.values(p, y0)):
            scale = abs(theta) if theta != 0 and math.isfinite(theta) else 1.0
            out[n * (1 + j):n * (2 + j)] = base / scale if error_control else _OFF_WEIGHT
        return out

    def nonnegative(self, mask) -> np.ndarray:
        """The states' non-negativity mask, extended with False for the sensitivities."""
        n, m = self.n, len(self.wrt)
        out = np.zeros(n * (1 + m), dtype=bool)
        out[:n] = np.broadcast_to(np.asarray(mask, dtype=bool), (n,))
        return out


@dataclass(frozen=True)
class Sensitivities:
    """Sensitivities at the output times: ``raw[t, i, j]`` = dy_i/dθ_j and ``normalised``
    = d ln y_i / d ln θ_j = raw * θ_j / y_i (NaN where y_i or θ_j is zero)."""
    wrt: tuple
    raw: np.ndarray
    normalised: np.ndarray


def split(sm: SensitiveModel, y_aug: np.ndarray, theta: np.ndarray) -> tuple[np.ndarray, Sensitivities]:
    """(states (k, n), sensitivities) from augmented outputs ``y_aug`` (k, n (1 + m))."""
    n, m = sm.n, len(sm.wrt)
    y = y_aug[:, :n]
    raw = y_aug[:, n:].reshape(len(y_aug), m, n).transpose(0, 2, 1).copy()
    with np.errstate(divide="ignore", invalid="ignore"):
        norm = raw * theta[None, None, :] / y[:, :, None]
    bad = (y[:, :, None] == 0) | (theta[None, None, :] == 0) | ~np.isfinite(norm)
    norm = np.where(bad, np.nan, norm)
    return y.copy(), Sensitivities(tuple(sm.wrt), raw, norm)


def _labels(spec, parameters, initial) -> tuple[list, list, list]:
    issues, labels, pidx, sidx = [], [], [], []
    params = {name: i for i, name in enumerate(spec.param_names)}
    states = {name: i for i, name in enumerate(spec.state_names)}
    for section, names, table in (("parameters", parameters, params), ("initial", initial, states)):
        seen = set()
        for pos, name in enumerate(names):
            if not isinstance(name, str) or name not in table:
                issues.append(ModelIssue((section, pos), f"unknown {section[:-1] if section == 'parameters' else 'state'} "
                                         f"'{name}'", None, suggest(str(name), list(table))))
            elif name in seen:
                issues.append(ModelIssue((section, pos), f"'{name}' is named twice"))
            else:
                seen.add(name)
                labels.append(name if section == "parameters" else INITIAL_PREFIX + name)
                pidx.append(table[name] if section == "parameters" else -1)
                sidx.append(table[name] if section == "initial" else -1)
    if not labels and not issues:
        issues.append(ModelIssue((), "name at least one parameter or initial value"))
    if issues:
        raise ModelError(issues)
    return labels, pidx, sidx


def _augment(model, parameters, initial, limits: Limits) -> SensitiveModel:
    started = time.perf_counter()
    base = prepare(model, limits)
    spec, _ = read_checked(model, limits)
    labels, pidx, sidx = _labels(spec, parameters, initial)
    n, m = len(spec.state_names), len(labels)
    if n * (1 + m) > MAX_AUGMENTED_STATES:
        raise ModelError([ModelIssue((), f"{n} states with {m} sensitivities make {n * (1 + m)} equations; "
                                         f"the limit is {MAX_AUGMENTED_STATES}: name fewer parameters")])
    b = spec.builder
    b.strict = False
    rows: list[list] = [[] for _ in range(n)]
    for i, k, node in jacobian(b, spec.rhs, "y"):
        rows[i].append((k, node))
    dfdp: dict = {(i, k): node for i, k, node in jacobian(b, spec.rhs, "p")}
    names = list(spec.state_names)
    rhs = list(spec.rhs)
    for j, label in enumerate(labels):
        s = [b.var("y", n * (1 + j) + k, f"d{spec.state_names[k]}/d{label}") for k in range(n)]
        names += [f"d{spec.state_names[k]}/d{label}" for k in range(n)]
        for i in range(n):
            acc = dfdp.get((i, pidx[j]), b.zero) if pidx[j] >= 0 else b.zero
            for k, node in rows[i]:
                acc = b.add(acc, b.mul(node, s[k]))
            rhs.append(acc)
    N = n * (1 + m)
    aug_spec = dataclasses.replace(
        spec, state_names=names, y0=list(spec.y0) + [0.0] * (N - n),
        nonnegative=list(spec.nonnegative) + [False] * (N - n), clamped=[False] * N,
        rhs=rhs, structure=[], ddt_terms={}, equations=[], reaction_names=[], law_states=[],
        units={})
    nnz = sum(1 for _ in jacobian(b, rhs, "y"))
    if nnz > limits.max_jacobian_nonzeros:
        raise ModelError([ModelIssue((), f"the sensitivity system's Jacobian has {nnz} non-zeros; the limit is "
                                         f"{limits.max_jacobian_nonzeros}: name fewer parameters")])
    # its own content hash: caches keyed by it (machine code on disk) must never mix the two
    digest = hashlib.sha256(f"{base.content_hash}|sensitivity|{labels}".encode()).hexdigest()
    augmented = _compile(aug_spec, limits, digest, started)
    laws = base.conservation  # the states' conservation laws still hold; checked on the state block
    augmented = dataclasses.replace(
        augmented, conservation=np.hstack([laws, np.zeros((len(laws), N - n))]) if len(laws)
        else np.zeros((0, N)), conservation_labels=base.conservation_labels, units=dict(base.units))
    return SensitiveModel(base, augmented, tuple(labels), tuple(pidx), tuple(sidx))


_CACHE: OrderedDict = OrderedDict()
_LOCK = threading.Lock()
CACHE_SIZE = 16


def prepare_sensitivities(model, parameters=(), initial=(), limits: Limits | None = None) -> SensitiveModel:
    """The model with sensitivity equations for ``parameters`` (names) and the initial values
    of ``initial`` (state names); raises ModelError naming what is wrong. Cached by content."""
    limits = limits or DEFAULT_LIMITS
    digest = content_hash(model)
    key = (digest, tuple(parameters), tuple(initial), limits)
    if digest is not None:
        with _LOCK:
            hit = _CACHE.get(key)
            if hit is not None:
                _CACHE.move_to_end(key)
                return hit
    sm = _augment(model, list(parameters), list(initial), limits)
    if digest is not None:
        with _LOCK:
            _CACHE[key] = sm
            while len(_CACHE) > CACHE_SIZE:
                _CACHE.popitem(last=False)
    return sm


__all__ = ["INITIAL_PREFIX", "SensitiveModel", "Sensitivities", "prepare_sensitivities", "split"]
