"""Size limits on user models, checked before any parsing or compiling work.

Every limit is a plain number in one frozen dataclass so the service can pass
its own configuration; :data:`DEFAULT_LIMITS` is what ``prepare`` uses when
given nothing.
"""
from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Limits:
    max_expression_length: int = 4000    # characters in one expression
    max_nesting_depth: int = 64          # parentheses, unary signs and calls inside one another
    max_expression_nodes: int = 4000     # operators, names and numbers in one expression
    max_literal_digits: int = 30         # digits in one number literal
    max_exponent: float = 1000.0         # |constant exponent| in a power
    max_name_length: int = 64
    max_states: int = 5000
    max_parameters: int = 5000
    max_derived: int = 2000
    max_reactions: int = 20000
    max_species_per_side: int = 16       # terms on one side of a reaction equation
    max_coefficient: int = 1000          # a stoichiometric coefficient, whole or fractional
    max_events: int = 100
    max_instructions: int = 5_000_000    # all compiled programs together
    max_jacobian_nonzeros: int = 500_000  # structural, counted before differentiating
    max_stoichiometry_cells: int = 25_000_000  # states x reactions (a dense float64 matrix)
    max_issues: int = 50                 # issues reported for one model


DEFAULT_LIMITS = Limits()
