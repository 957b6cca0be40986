"""Bounds on the machine-code disk cache.

Every model compiled to machine code leaves its generated module ``native/k_<digest>.py``
and numba's compiled files ``native_<path hash>/k_<digest>.*`` (about 60 KB together) in
the engine's cache folder. :func:`prune` keeps the newest models within a byte budget
(``STIFFLANE_NATIVE_CACHE_MB``, default 256, about 4,000 models): a model's files are
touched each time a process loads them, so the ones dropped are the least recently used.
A process that holds a dropped model keeps running it (the code is in memory); a later
process compiles it again.
"""
from __future__ import annotations

import os
from pathlib import Path

DEFAULT_BUDGET_MB = 256.0


def budget_bytes() -> int:
    return int(float(os.environ.get("STIFFLANE_NATIVE_CACHE_MB", DEFAULT_BUDGET_MB)) * 2**20)


def touch(module_path: Path) -> None:
    """Mark a model's machine code as used now."""
    try:
        os.utime(module_path)
    except OSError:
        pass


def _entries(folder: Path) -> dict[str, list[Path]]:
    """digest -> its files (generated module first)."""
    out: dict[str, list[Path]] = {}
    for path in folder.glob("k_*.py"):
        out.setdefault(path.stem[2:], []).insert(0, path)
    for compiled in folder.parent.glob("native_*"):
        for path in compiled.glob("k_*"):
            digest = path.name[2:].split(".", 1)[0]
            out.setdefault(digest, []).append(path)
    return out


def usage(folder: Path) -> tuple[int, int]:
    """(models, bytes) in the cache folder ``folder`` (the ``native`` folder)."""
    entries = _entries(folder)
    return len(entries), sum(_size(p) for files in entries.values() for p in files)


def _size(path: Path) -> int:
    try:
        return path.stat().st_size
    except OSError:
        return 0


def _age_key(files: list[Path]) -> float:
    try:
        return files[0].stat().st_mtime
    except OSError:
        return 0.0


def prune(folder: Path, budget: int | None = None, keep: frozenset = frozenset()) -> int:
    """Delete the least recently used models until the folder fits ``budget`` bytes;
    never the digests in ``keep``. Returns how many models were dropped."""
    budget = budget_bytes() if budget is None else budget
    entries = _entries(folder)
    sizes = {d: sum(_size(p) for p in files) for d, files in entries.items()}
    total = sum(sizes.values())
    dropped = 0
    for digest in sorted(entries, key=lambda d: _age_key(entries[d])):
        if total <= budget:
            break
        if digest in keep:
            continue
        for path in entries[digest]:
            try:
                path.unlink()
            except OSError:
                pass
        total -= sizes[digest]
        dropped += 1
    return dropped
