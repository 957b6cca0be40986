"""Binary container for results: a JSON header and raw float64 arrays, zlib-compressed.

Layout before compression: magic ``SLB1``, 4-byte little-endian header length,
UTF-8 JSON header ``{"meta": {...}, "arrays": [[name, shape], ...]}``, then the
arrays' bytes (C order, little-endian float64) in header order. No pickle.
"""
from __future__ import annotations

import json
import math
import struct
import zlib
from typing import Optional

import numpy as np

MAGIC = b"SLB1"


def json_safe(obj):
    """Plain JSON types only: numpy scalars and arrays unwrapped, NaN and +-Inf as None."""
    if isinstance(obj, dict):
        return {str(k): json_safe(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [json_safe(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return json_safe(obj.tolist())
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        return float(obj) if math.isfinite(obj) else None
    return obj


def encode(meta: dict, arrays: dict[str, np.ndarray]) -> bytes:
    order = [(name, list(np.shape(a))) for name, a in arrays.items()]
    header = json.dumps({"meta": json_safe(meta), "arrays": order}, allow_nan=False).encode()
    body = b"".join(np.ascontiguousarray(a, dtype="<f8").tobytes() for a in arrays.values())
    return zlib.compress(MAGIC + struct.pack("<I", len(header)) + header + body, 6)


def decode(blob: bytes) -> tuple[dict, dict[str, np.ndarray]]:
    raw = zlib.decompress(blob)
    if raw[:4] != MAGIC:
        raise ValueError("not a result blob")
    (n,) = struct.unpack("<I", raw[4:8])
    header = json.loads(raw[8:8 + n])
    offset = 8 + n
    arrays = {}
    for name, shape in header["arrays"]:
        count = int(np.prod(shape)) if shape else 1
        arrays[name] = np.frombuffer(raw, dtype="<f8", count=count, offset=offset).reshape(shape)
        offset += 8 * count
    return header["meta"], arrays


def pack_json(obj) -> bytes:
    """A JSON-safe object as compact, zlib-compressed JSON (chunk tables, start outcomes)."""
    return zlib.compress(json.dumps(obj, separators=(",", ":"), allow_nan=False).encode())


def unpack_json(blob) -> Optional[dict]:
    return None if blob is None else json.loads(zlib.decompress(blob))
