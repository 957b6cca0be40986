"""Reaction networks: arrow-notation equations, mass-action and Arrhenius
rates, the stoichiometric matrix and its conservation laws.

Mass action (Guldberg & Waage): ``a A + b B -> ...`` has rate
``k [A]^a [B]^b``; each species changes by its net coefficient times the rate,
so ``dc/dt = S r``. Modified Arrhenius: ``k = A T^n exp(-Ea / (R T))`` with
R = 8.314462618 J/(mol K) (exact in the 2019 SI; CODATA 2018 recommended
values). Conservation laws are the left null space of ``S`` (rows ``c`` with
``c^T S = 0``), cleaned to small integers and verified in exact rational
arithmetic.
"""
from __future__ import annotations

import math
import re
from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from engine.language.expr import Builder, ExprError, Node
from engine.language.limits import DEFAULT_LIMITS, Limits
from engine.language.names import suggest

GAS_CONSTANT = 8.314462618  # J/(mol K), exact (2019 SI)
CALORIE = 4.184             # J, thermochemical calorie
# Multiply Ea in these units by the factor to get Ea/R in kelvin.
EA_UNITS = {"J/mol": 1.0 / GAS_CONSTANT, "kJ/mol": 1000.0 / GAS_CONSTANT,
            "cal/mol": CALORIE / GAS_CONSTANT, "kcal/mol": 1000.0 * CALORIE / GAS_CONSTANT,
            "K": 1.0}

_TERM = re.compile(r" *(?:(?P<coef>[0-9]+(?:\.[0-9]*)?|\.[0-9]+) *)?(?P<name>[A-Za-z_][A-Za-z0-9_]*) *\Z")


@dataclass(frozen=True)
class Equation:
    reactants: tuple[tuple[str, Fraction], ...]
    products: tuple[tuple[str, Fraction], ...]
    reversible: bool


_ONE = Fraction(1)
STRUCTURAL_MAX_ORDER = 4
_COEFFICIENTS: dict[str, Fraction] = {}


def _coefficient(text: str | None) -> Fraction:
    if text is None:
        return _ONE
    value = _COEFFICIENTS.get(text)
    if value is None:
        value = Fraction(text)
        if len(_COEFFICIENTS) < 1000:
            _COEFFICIENTS[text] = value
    return value


def _side(text: str, offset: int, species, limits: Limits) -> tuple[tuple[str, Fraction], ...]:
    if not text.strip():
        return ()
    terms: dict[str, Fraction] = {}
    parts = text.split("+")
    if len(parts) > limits.max_species_per_side:
        raise ExprError(f"more than {limits.max_species_per_side} terms on one side", offset)
    pos = offset
    for part in parts:
        m = _TERM.match(part)
        if m is None:
            lead = len(part) - len(part.lstrip(" "))
            raise ExprError("expected a term like '2 A' or 'B' (coefficient, then species name)",
                            pos + lead)
        name, coef = m.group("name"), m.group("coef")
        if coef is not None and len(coef) > limits.max_literal_digits:
            raise ExprError("coefficient has too many digits", pos + m.start("coef"))
        value = _coefficient(coef)
        if value <= 0:
            raise ExprError("a coefficient must be positive", pos + m.start("coef"))
        if value > limits.max_coefficient:
            raise ExprError(f"coefficient {coef} is larger than {limits.max_coefficient}, the largest "
                            f"allowed", pos + m.start("coef"))
        if name not in species:
            raise ExprError(f"unknown species '{name}'; species must be declared in states",
                            pos + m.start("name"), suggest(name, species))
        terms[name] = terms.get(name, Fraction(0)) + value
        pos += len(part) + 1
    return tuple(terms.items())


def parse_equation(text: object, species, limits: Limits = DEFAULT_LIMITS) -> Equation:
    """Parse ``"2 A + B -> C"`` or ``"A <=> B"``; either side may be empty."""
    if not isinstance(text, str):
        raise ExprError("an equation must be a string")
    if len(text) > limits.max_expression_length:
        raise ExprError(f"the equation is longer than {limits.max_expression_length} characters")
    for i, ch in enumerate(text):
        if not (" " <= ch <= "~"):
            raise ExprError(f"character {ch!r} is not allowed; use printable ASCII only", i)
    arrows = [(m.start(), m.group()) for m in re.finditer(r"<=>|<->|->|=>|<-|=", text)]
    if len(arrows) == 1 and arrows[0][1] not in ("->", "<=>"):
        at, got = arrows[0]
        meant = "<=>" if got == "<->" else "->"
        raise ExprError(f"'{got}' is not an arrow of the model language: use '->' (irreversible) "
                        f"or '<=>' (reversible)", at, f"did you mean '{meant}'?")
    if len(arrows) != 1:
        where = arrows[1][0] if len(arrows) > 1 else None
        raise ExprError("an equation needs exactly one arrow: '->' (irreversible) or "
                        "'<=>' (reversible)", where)
    at, arrow = arrows[0]
    left = _side(text[:at], 0, species, limits)
    right = _side(text[at + len(arrow):], at + len(arrow), species, limits)
    if not left and not right:
        raise ExprError("both sides of the equation are empty", at)
    return Equation(left, right, arrow == "<=>")


def mass_action(b: Builder, k: Node, side, state_nodes: dict[str, Node]) -> Node:
    """k * prod(c_s ^ order_s) over one side of an equation."""
    rate = k
    for name, coef in side:
        x = state_nodes[name]
        if coef.denominator == 1:
            term = b.powi(x, int(coef))
        else:
            term = b.binary("pow", x, b.const(float(coef)))
        rate = b.mul(rate, term)
    return rate


def arrhenius(b: Builder, A: Node, n: float, ea_over_r: float, T: Node) -> Node:
    """A * T^n * exp(-(Ea/R) / T)."""
    k = A
    if n != 0.0:
        k = b.mul(k, b.binary("pow", T, b.const(n)))
    if ea_over_r != 0.0:
        k = b.mul(k, b.unary("exp", b.neg(b.div(b.const(ea_over_r), T))))
    return k


def stoichiometry(equations: list[Equation], state_index: dict[str, int], n: int):
    """(S as float64 n x m, exact entries {(row, col): Fraction})."""
    exact: dict[tuple[int, int], Fraction] = {}
    for j, eq in enumerate(equations):
        for sign, side in ((-1, eq.reactants), (1, eq.products)):
            for name, coef in side:
                key = (state_index[name], j)
                exact[key] = exact.get(key, Fraction(0)) + sign * coef
    exact = {k: v for k, v in exact.items() if v != 0}
    S = np.zeros((n, len(equations)))
    for (i, j), v in exact.items():
        S[i, j] = float(v)
    return S, exact


def _left_null_space(sub: np.ndarray) -> np.ndarray:
    """Orthonormal rows spanning {c : c^T sub = 0}, from the eigenvectors of the
    (near-)zero eigenvalues of the Gram matrix sub sub^T. Squaring the singular values
    is harmless here: stoichiometric entries are small rationals, candidates must also
    pass a residual test, and the integer laws are then checked exactly."""
    from scipy import sparse
    from scipy.linalg import eigh
    sp = sparse.csr_matrix(sub)
    G = (sp @ sp.T).toarray()
    scale = max(float(np.abs(G).max()), 1.0)
    if G.shape[0] <= 400:
        w, V = np.linalg.eigh(G)
        V = V[:, w <= 1e-9 * scale]
    else:  # only the eigenvectors wanted
        _, V = eigh(G, subset_by_value=(-np.inf, 1e-9 * scale), driver="evr")
    if V.shape[1]:
        V = V[:, np.linalg.norm(sp.T @ V, axis=0) <= 1e-6 * np.sqrt(scale)]
    return V.T


def _echelon(null: np.ndarray) -> np.ndarray:
    """Rows spanning the same space, equal to the identity on k pivot columns chosen
    by QR with column pivoting (a reduced row echelon form up to row order)."""
    from scipy.linalg import qr
    k = null.shape[0]
    _, piv = qr(null, mode="r", pivoting=True)
    cols = np.sort(piv[:k])
    B = np.linalg.solve(null[:, cols], null)
    B[np.abs(B) < 1e-10] = 0.0
    return B[np.argsort([np.flatnonzero(row)[0] for row in B])]


def _integer_rows(B: np.ndarray, max_denominator: int = 60):
    """(rows scaled to coprime integers, mask of rows where that was possible)."""
    ints = np.zeros(B.shape, dtype=np.int64)
    done = np.zeros(B.shape[0], dtype=bool)
    for d in range(1, max_denominator + 1):
        todo = np.flatnonzero(~done)
        if not len(todo):
            break
        scaled = B[todo] * d
        rounded = np.round(scaled)
        good = np.max(np.abs(scaled - rounded), axis=1) < 1e-7
        ints[todo[good]] = rounded[good].astype(np.int64)
        done[todo[good]] = True
    g = np.gcd.reduce(np.abs(ints), axis=1)
    g[g == 0] = 1
    return ints // g[:, None], done


def _exact_integer_matrix(exact: dict, shape) -> "object":
    from scipy import sparse
    den = 1
    for v in exact.values():
        den = den * v.denominator // math.gcd(den, v.denominator)
    rows = [i for i, _ in exact]
    cols = [j for _, j in exact]
    vals = [int(v * den) for v in exact.values()]
    return sparse.csc_matrix((np.array(vals, dtype=np.int64), (rows, cols)), shape=shape)


_BLAS = []


def _single_threaded_blas():
    """One BLAS thread for the small dense problems here: on a shared machine, spinning
    BLAS threads slow down everything else in the process (measured 4x on prepare())."""
    if not _BLAS:
        try:
            from threadpoolctl import ThreadpoolController
            _BLAS.append(ThreadpoolController())
        except ImportError:  # optional dependency
            _BLAS.append(None)
    if _BLAS[0] is None:
        import contextlib
        return contextlib.nullcontext()
    return _BLAS[0].limit(limits=1, user_api="blas")


def conservation_laws(S: np.ndarray, exact: dict, eligible: list[int]) -> np.ndarray:
    with _single_threaded_blas():
        return _conservation_laws(S, exact, eligible)


def _conservation_laws(S: np.ndarray, exact: dict, eligible: list[int]) -> np.ndarray:
    """Rows c (over all states, zero outside ``eligible``) with c^T S = 0.

    Found from the null space of S restricted to ``eligible`` rows, brought to
    echelon form, scaled to small coprime integers and checked exactly in integer
    arithmetic; a row that does not check exactly is kept as floats (largest entry 1).
    """
    n = S.shape[0]
    if not eligible or S.shape[1] == 0:
        return np.zeros((0, n))
    null = _left_null_space(S[eligible])
    if null.shape[0] == 0:
        return np.zeros((0, n))
    B = np.zeros((null.shape[0], n))
    B[:, eligible] = _echelon(null)
    ints, ok = _integer_rows(B)
    residual = ints @ _exact_integer_matrix(exact, S.shape)
    ok &= np.asarray(np.abs(residual).sum(axis=1)).ravel() == 0
    flip = ints.sum(axis=1) < 0
    ints[flip] *= -1
    laws = np.where(ok[:, None], ints.astype(float), B / np.abs(B).max(axis=1, keepdims=True))
    return laws


def law_label(row: np.ndarray, names) -> str:
    """'A + B + 2 C' style text of one conservation law."""
    parts = []
    for c, name in zip(row, names):
        if c == 0:
            continue
        mag = abs(c)
        coef = "" if mag == 1 else (f"{int(mag)} " if mag == int(mag) else f"{mag:.6g} ")
        sign = "-" if c < 0 else "+"
        parts.append((sign, coef + name))
    if not parts:
        return "0"
    text = ("-" if parts[0][0] == "-" else "") + parts[0][1]
    return text + "".join(f" {s} {t}" for s, t in parts[1:])


# ---------------------------------------------------------------------------
# The "reactions" section of a model (called by engine.model's reader)

REACTION_KEYS = ("name", "equation", "k", "k_reverse", "arrhenius", "rate", "description")
ARRHENIUS_KEYS = ("A", "n", "Ea", "Ea_unit", "T")


def _arrhenius_k(r, spec_a, path):
    if not r.keys(spec_a, ARRHENIUS_KEYS, path):
        return None
    b = r.spec.builder
    for key in ("A", "T"):
        if key not in spec_a:
            r.issue((*path, key), "is required")
    A = r.expr(spec_a.get("A"), (*path, "A")) if "A" in spec_a else None
    T = r.expr(spec_a.get("T"), (*path, "T")) if "T" in spec_a else None
    n = r.number(spec_a.get("n"), (*path, "n"), 0.0)
    ea = r.number(spec_a.get("Ea"), (*path, "Ea"), 0.0)
    unit = spec_a.get("Ea_unit", "J/mol")
    if not isinstance(unit, str) or unit not in EA_UNITS:
        r.issue((*path, "Ea_unit"), "must be one of " + ", ".join(EA_UNITS))
        return None
    if A is None or T is None or n is None or ea is None:
        return None
    try:
        return arrhenius(b, A, n, ea * EA_UNITS[unit], T)
    except ExprError as err:  # e.g. a numeric T whose T^n or exp(-Ea/RT) overflows
        r.issue(path, "the rate constant A*T^n*exp(-Ea/(R*T)) is not a finite float64 number for "
                      f"these values ({err.message})", None, err.suggestion)
        return None


def _one_reaction(r, j, item):
    spec, b = r.spec, r.spec.builder
    path = ("reactions", j)
    if not r.keys(item, REACTION_KEYS, path):
        return
    name = item.get("name", f"R{j + 1}")
    if not isinstance(name, str) or not name or len(name) > r.limits.max_name_length \
            or not all(" " <= c <= "~" for c in name) or name in spec.reaction_names:
        r.issue((*path, "name"), "must be a unique printable ASCII string of at most "
                                 f"{r.limits.max_name_length} characters")
    r.text(item.get("description"), (*path, "description"))
    eq = None
    if "equation" not in item:
        r.issue((*path, "equation"), "is required, e.g. '2 A + B -> C' or 'A <=> B'")
    else:
        try:
            eq = parse_equation(item["equation"], spec.state_names, r.limits)
        except ExprError as err:
            r.issue((*path, "equation"), err.message, err.position, err.suggestion)
    given = [k for k in ("k", "arrhenius", "rate") if k in item]
    if len(given) != 1:
        r.issue(path, "give exactly one of 'k' (mass action), 'arrhenius' or 'rate' (custom law)")
        return
    how = given[0]
    if how == "rate":
        if "k_reverse" in item:
            r.issue((*path, "k_reverse"), "not used with 'rate': the custom rate is the net rate")
        rate = r.expr(item["rate"], (*path, "rate"))
        structure = (rate, (), None, ())
    else:
        k = r.expr(item["k"], (*path, "k")) if how == "k" else \
            _arrhenius_k(r, item["arrhenius"], (*path, "arrhenius"))
        kr = None
        if eq is not None and eq.reversible:
            if "k_reverse" not in item:
                r.issue((*path, "k_reverse"), "is required for a reversible '<=>' reaction")
            else:
                kr = r.expr(item["k_reverse"], (*path, "k_reverse"))
        elif "k_reverse" in item and eq is not None:  # an unreadable equation says enough
            r.issue((*path, "k_reverse"), "only for reversible '<=>' reactions")
        if eq is None or k is None or (eq.reversible and kr is None):
            return
        nodes = spec.scope
        forward = mass_action(b, k, eq.reactants, nodes)
        backward = mass_action(b, kr, eq.products, nodes) if eq.reversible else None
        rate = b.sub(forward, backward) if eq.reversible else forward
        # whole orders up to STRUCTURAL_MAX_ORDER run on the structural mass-action path
        # (species repeated by order); other orders as expressions (powers by squaring), so
        # the work never grows with a coefficient's value
        integral = all(c.denominator == 1 and c <= STRUCTURAL_MAX_ORDER
                       for _, c in (*eq.reactants, *eq.products))
        structure = (k, eq.reactants, kr, eq.products) if integral else \
            (forward, (), backward, ())
    if eq is None or rate is None:
        return
    spec.equations.append(eq)
    spec.rates.append(rate)
    spec.structure.append(structure)
    spec.reaction_names.append(str(name))


def read_reactions(r, model) -> None:
    """Parse the reactions of ``model`` into ``r.spec`` (equations, net rate nodes, names)."""
    for j, item in enumerate(r.section(model, "reactions", list, r.limits.max_reactions)):
        _one_reaction(r, j, item)
