"""Large sparse models: Python loops around SuperLU for the implicit methods (``core``:
shared loop head and the Rosenbrock step; ``radau``: Radau IIA; ``bdf``: variable-order BDF)."""
