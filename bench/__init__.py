"""Benchmark suite: accuracy and speed of the engine against SciPy and SUNDIALS.

Entry point: ``python -m bench.run --quick|--full`` (see docs/benchmarks.md).
"""
