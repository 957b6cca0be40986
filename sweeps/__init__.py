"""Batch designs and member summaries: grids, random and Latin-hypercube samples
reproducible by index, and the summaries of one member's trajectory. NumPy only (no
numba), shared by the API (validation, tables) and the worker (running members)."""
