"""Check a model and describe it without compiling it: issues, sizes, facts.

Everything here is pure Python and NumPy (no numba), so the API answers spec checks with
it, and ``engine.model.prepare`` calls :func:`size_issues` before any derivative work: a
model whose Jacobian or stoichiometric matrix would be too large is refused in time
proportional to its text, not to the work it asks for.
"""
from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass

import numpy as np

from engine.language.expr import postorder
from engine.language.limits import DEFAULT_LIMITS, Limits
from engine.language.reactions import conservation_laws, law_label, stoichiometry
from engine.language.spec import read_model


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
    """Raised by ``prepare`` and :func:`describe` with every issue found."""

    def __init__(self, issues: list[ModelIssue]):
        self.issues = list(issues)
        super().__init__("; ".join("/".join(map(str, i.path)) + ": " + i.text() for i in self.issues[:5]))


def content_hash(model) -> str | None:
    """SHA-256 of the model's canonical JSON (None when it is not JSON)."""
    try:
        text = json.dumps(model, sort_keys=True, separators=(",", ":"), allow_nan=False)
    except (TypeError, ValueError, RecursionError):
        return None
    return hashlib.sha256(text.encode()).hexdigest()


def check_model(model, limits: Limits | None = None) -> list[ModelIssue]:
    """Every problem in ``model`` (empty list if it is valid), sizes included. Never raises
    on bad input."""
    limits = limits or DEFAULT_LIMITS
    try:
        spec, issues = read_model(model, limits)
    except RecursionError:
        return [ModelIssue((), "model is nested too deeply")]
    if issues:
        return [ModelIssue(*i) for i in issues]
    return size_issues(sizes(spec), limits)


@dataclass(frozen=True)
class Sizes:
    """What compiling a model would build, counted from its expression tree."""

    states: int
    reactions: int
    nodes: int                # distinct expression nodes (shared subexpressions once)
    jacobian_nonzeros: int    # structural: (i, j) where rhs_i reads state j


def sizes(spec) -> Sizes:
    """Structural sizes, in one pass over the shared expression DAG.

    Each node's set of states it reads is a Python integer used as a bit set, so the
    cost is that of a few big-integer ORs per node, never one entry per Jacobian element.
    """
    n = len(spec.state_names)
    reads: dict[int, int] = {}
    nodes = postorder(spec.rhs)
    for node in nodes:
        if node.op == "y":
            mask = 1 << node.value
        else:
            mask = 0
            for child in node.args:
                mask |= reads[id(child)]
        reads[id(node)] = mask
    nnz = sum(reads[id(root)].bit_count() for root in spec.rhs)
    return Sizes(n, len(spec.equations), len(nodes), nnz)


def size_issues(s: Sizes, limits: Limits) -> list[ModelIssue]:
    """Refusals for a model too large to compile within ``limits``."""
    issues = []
    if s.jacobian_nonzeros > limits.max_jacobian_nonzeros:
        issues.append(ModelIssue((), f"the Jacobian would have {s.jacobian_nonzeros} non-zero entries "
                                     f"(right-hand sides reading states); the limit is "
                                     f"{limits.max_jacobian_nonzeros}: couple fewer states to each "
                                     f"derivative, e.g. through fewer shared sums in 'derived'"))
    cells = s.states * s.reactions
    if cells > limits.max_stoichiometry_cells:
        issues.append(ModelIssue(("reactions",), f"{s.states} states x {s.reactions} reactions "
                                                 f"= {cells} stoichiometric entries; the limit is "
                                                 f"{limits.max_stoichiometry_cells}"))
    if s.nodes + s.jacobian_nonzeros > limits.max_instructions:
        issues.append(ModelIssue((), f"the compiled model would need at least "
                                     f"{s.nodes + s.jacobian_nonzeros} instructions; the limit is "
                                     f"{limits.max_instructions}"))
    return issues


def read_checked(model, limits: Limits):
    """(spec, sizes) of a valid model within the size limits; raises ModelError."""
    try:
        spec, issues = read_model(model, limits)
    except RecursionError:
        raise ModelError([ModelIssue((), "model is nested too deeply")]) from None
    if issues:
        raise ModelError([ModelIssue(*i) for i in issues])
    s = sizes(spec)
    refused = size_issues(s, limits)
    if refused:
        raise ModelError(refused)
    return spec, s


def facts(spec, S: np.ndarray, laws: np.ndarray, jacobian_nonzeros: int, digest: str) -> dict:
    """JSON-safe description: names, counts, stoichiometric matrix, conservation laws."""
    rows, cols = np.nonzero(S)
    return {
        "title": spec.title, "content_hash": digest,
        "counts": {"states": len(spec.state_names), "parameters": len(spec.param_names),
                   "derived": len(spec.aux_names), "events": len(spec.event_names),
                   "reactions": len(spec.reaction_names), "jacobian_nonzeros": int(jacobian_nonzeros)},
        "states": list(spec.state_names), "parameters": list(spec.param_names),
        "derived": list(spec.aux_names), "events": list(spec.event_names),
        "reactions": list(spec.reaction_names),
        "conservation_laws": [{"label": law_label(row, spec.state_names),
                               "coefficients": [float(c) for c in row]} for row in laws],
        "stoichiometry": {"rows": "states", "columns": "reactions",
                          "entries": [[int(i), int(j), float(S[i, j])] for i, j in zip(rows, cols)]},
    }


def describe(model, limits: Limits | None = None) -> dict:
    """Facts about a valid model without compiling it; raises ModelError.

    ``counts.jacobian_nonzeros`` is the structural count (entries whose right-hand side
    reads the state); the compiled model's exact count can only be smaller.
    """
    limits = limits or DEFAULT_LIMITS
    spec, s = read_checked(model, limits)
    n = len(spec.state_names)
    S, exact = stoichiometry(spec.equations, {name: i for i, name in enumerate(spec.state_names)}, n)
    laws = conservation_laws(S, exact, spec.law_states).reshape(-1, n)
    return facts(spec, S, laws, s.jacobian_nonzeros, content_hash(model) or "")
