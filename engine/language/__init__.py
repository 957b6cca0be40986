"""The model language: names, limits, expression trees, the parser, exact derivatives,
reaction equations and the JSON model reader. Pure Python and NumPy: no numba, so the API
can check models without loading the compiled kernels."""
