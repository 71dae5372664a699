"""Arrays as BLOBs: a header `<4s dtype (e.g. b"<c16", NUL-padded)><u1 ndim><ndim × u8 shape>`
followed by the raw little-endian C-order bytes.
"""

from __future__ import annotations

import math
import struct
from typing import Any

import numpy as np

from taprig.schema.pointset import ARRAY_DTYPES

from ..errors import StoreError

_HEAD = struct.Struct("<4sB")


def encode_array(a: Any, dtype: np.dtype[Any], ndim: int, what: str) -> bytes:
    """Header + raw little-endian bytes of `a` cast to `dtype`; StoreError if it does not fit."""
    arr = np.asarray(a)
    if arr.ndim != ndim or not np.can_cast(arr.dtype, dtype, casting="same_kind"):
        raise StoreError(f"{what}: expected {ndim}-d {dtype.name}, got {arr.ndim}-d {arr.dtype}")
    head = _HEAD.pack(dtype.str.encode(), ndim) + struct.pack(f"<{ndim}Q", *arr.shape)
    return head + np.ascontiguousarray(arr, dtype=dtype).tobytes()


def decode_array(blob: bytes) -> np.ndarray:
    """The (read-only) array of an `encode_array` BLOB."""
    try:
        code, ndim = _HEAD.unpack_from(blob)
        dtype = np.dtype(code.rstrip(b"\0").decode())
        shape = struct.unpack_from(f"<{ndim}Q", blob, _HEAD.size)
    except (struct.error, TypeError, ValueError) as exc:
        raise StoreError(f"corrupt array BLOB header ({len(blob)} bytes): {exc}") from exc
    offset = _HEAD.size + 8 * ndim
    if dtype.str not in ARRAY_DTYPES or len(blob) - offset != dtype.itemsize * math.prod(shape):
        raise StoreError(f"corrupt array BLOB ({dtype}, shape {shape}, {len(blob)} bytes)")
    return np.frombuffer(blob, dtype, offset=offset).reshape(shape)
