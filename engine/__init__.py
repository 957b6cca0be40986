"""The numerical engine: model language, compiled kernels, integrators, diagnostics.

Imports numpy, scipy and numba only. On first import, unless NUMBA_CACHE_DIR is already
set, numba's cache goes to a folder named after the engine's source hash (engine/cache.py),
so a changed engine never runs stale compiled code.
"""
import os as _os
from pathlib import Path as _Path

if "NUMBA_CACHE_DIR" not in _os.environ:
    from engine.cache import configure as _configure

    _configure(_Path(__file__).resolve().parent.parent / "var" / "numba-cache")
