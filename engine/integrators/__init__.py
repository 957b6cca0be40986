"""The integrators: tableaux, the solver state layout, one module per method's step, the
compiled driver loop with events and stiffness switching; large sparse models in ``sparse``."""
