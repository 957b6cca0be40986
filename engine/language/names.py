"""Names in the model language: what a valid name is, reserved words, and
"did you mean ...?" suggestions for unknown names."""
from __future__ import annotations

import difflib
import re

NAME_RE = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")

# Functions and their argument counts (min, max); None = any number >= min.
FUNCTIONS: dict[str, tuple[int, int | None]] = {
    "exp": (1, 1), "log": (1, 1), "log10": (1, 1), "sqrt": (1, 1),
    "sin": (1, 1), "cos": (1, 1), "tan": (1, 1),
    "sinh": (1, 1), "cosh": (1, 1), "tanh": (1, 1),
    "abs": (1, 1), "sign": (1, 1), "step": (1, 1),
    "min": (2, None), "max": (2, None), "if": (3, 3),
}
KEYWORDS = ("and", "or", "not")
CONSTANTS = {"pi": 3.141592653589793}
TIME = "t"
RESERVED = frozenset(FUNCTIONS) | frozenset(KEYWORDS) | frozenset(CONSTANTS) | {TIME}


def name_problem(name: object, max_length: int) -> str | None:
    """Why ``name`` cannot name a state, parameter, derived quantity or reaction; None if it can."""
    if not isinstance(name, str):
        return "a name must be a string"
    if len(name) > max_length:
        return f"name is longer than {max_length} characters"
    if not NAME_RE.match(name):
        return ("a name must start with a letter or '_' and contain only ASCII letters, "
                "digits and '_'")
    if name.startswith("__"):
        return "names starting with '__' are not allowed"
    if name in RESERVED:
        return f"'{name}' is reserved (functions, constants, t, and/or/not)"
    return None


def one_edit_apart(a: str, b: str) -> bool:
    """True when one substitution, insertion, deletion or swap of neighbours turns a into b."""
    if a == b or abs(len(a) - len(b)) > 1:
        return False
    if len(a) == len(b):
        diff = [i for i, (x, y) in enumerate(zip(a, b)) if x != y]
        return len(diff) == 1 or (len(diff) == 2 and diff[1] == diff[0] + 1
                                  and a[diff[0]] == b[diff[1]] and a[diff[1]] == b[diff[0]])
    short, long_ = (a, b) if len(a) < len(b) else (b, a)
    i = next((k for k, (x, y) in enumerate(zip(short, long_)) if x != y), len(short))
    return short[i:] == long_[i + 1:]


def suggest(name: str, known) -> str | None:
    """A "did you mean ...?" hint for an unknown name, or None."""
    close = difflib.get_close_matches(name, list(known), n=3, cutoff=0.6)
    if not close:  # short names: one letter or digit off ('H3' for 'H2', 'kf' for 'k_f')
        close = [k for k in known if one_edit_apart(name, k)][:3]
    if not close:
        lowered = {k.lower(): k for k in known}
        if name.lower() in lowered:
            close = [lowered[name.lower()]]
    if not close:
        return None
    return "did you mean " + " or ".join(f"'{c}'" for c in close) + "?"
