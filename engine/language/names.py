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


def suggest(name: str, known) -> str | None:
    """A "did you mean ...?" hint for an unknown name, or None."""
    close = difflib.get_close_matches(name, list(known), n=3, cutoff=0.6)
    if not close:
        lowered = {k.lower(): k for k in known}
        if name.lower() in lowered:
            close = [lowered[name.lower()]]
    if not close:
        return None
    return "did you mean " + " or ".join(f"'{c}'" for c in close) + "?"
