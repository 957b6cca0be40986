"""Where numba keeps the engine's compiled kernels: one folder per engine source version.

numba checks a cached function only against its own source file, so a constant
imported from another engine module can be frozen into a stale entry. Naming the
cache folder after a hash of every engine source file makes any change start a
fresh cache. Import this before numba (it imports nothing heavy).
"""
from __future__ import annotations

import hashlib
import os
from pathlib import Path

ENGINE_DIR = Path(__file__).resolve().parent


def source_hash() -> str:
    h = hashlib.sha256()
    for path in sorted(ENGINE_DIR.rglob("*.py")):  # every sub-package: a moved file is a change too
        h.update(path.relative_to(ENGINE_DIR).as_posix().encode())
        h.update(path.read_bytes())
    return h.hexdigest()[:16]


def cache_dir(base: str | os.PathLike) -> str:
    return str(Path(base) / source_hash())


def configure(default_base: str | os.PathLike) -> str:
    """Set NUMBA_CACHE_DIR to <base>/<engine hash> (base: STIFFLANE_NUMBA_CACHE or the default)."""
    path = cache_dir(os.environ.get("STIFFLANE_NUMBA_CACHE") or default_base)
    os.environ["NUMBA_CACHE_DIR"] = path
    return path
