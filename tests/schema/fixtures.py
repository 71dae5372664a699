"""Point sets for the schema's tests: random arrays holding the awkward values a float can."""

from __future__ import annotations

import struct
from typing import Any

import numpy as np

from taprig.schema import codec, objects, pointset
from taprig.schema.records import WirePointSet

from .golden import wire_point_set

ARRAYS = ("freq_hz", "h1", "h2", "coherence", "gff", "gxx", "gfx")
"""The point set's arrays as the published schema names them (written out on purpose: the
derived table is checked against this list)."""
BIG = 1 << 24


def make_point_set(
    n_resp: int = 2, n_freq: int = 33, n_hits: int = 2, seed: int = 1
) -> WirePointSet:
    """Random arrays with the awkward values a float can hold: NaN with a payload, ±inf, -0.0,
    a subnormal."""
    rng = np.random.default_rng(seed)
    odd = np.array([0.0, -0.0, np.inf, -np.inf, 5e-324, np.nan], dtype="<f8")
    odd[5] = np.frombuffer(struct.pack("<Q", 0x7FF8_0000_DEAD_BEEF), "<f8")[0]  # NaN payload

    def real(*shape: int, offset: int = 0) -> np.ndarray:
        a = rng.standard_normal(shape)
        a.flat[: odd.size] = odd[: a.size]
        return a

    def cplx(*shape: int, offset: int = 0) -> np.ndarray:
        c = np.empty(shape, dtype="<c16")  # parts set apart: 1j * inf would make a NaN
        c.real, c.imag = real(*shape), real(*shape)[..., ::-1]
        return c

    return in_table_dtypes(wire_point_set(n_resp, n_freq, n_hits, real=real, cplx=cplx, block=64))


ODD_F4 = np.array([0.0, -0.0, np.inf, -np.inf, 1e-45, np.nan], dtype="<f4")
ODD_F4[5] = np.frombuffer(struct.pack("<I", 0x7FC0_BEEF), "<f4")[0]  # NaN with a payload
"""binary32's awkward values: ±0, ±inf, the smallest subnormal (2⁻¹⁴⁹), a NaN payload."""


def in_table_dtypes(ps: WirePointSet) -> WirePointSet:
    """`ps` with each array in its dtype of `schema.pointset` (as a decoder gives it back),
    float32 ones starting with binary32's awkward values."""
    arrays = {}
    for a in pointset.ARRAYS:
        arr = np.array(getattr(ps, a.name), dtype=a.dtype)
        if a.dtype.itemsize // (2 if a.dtype.kind == "c" else 1) == 4:
            parts = [arr.real, arr.imag] if a.dtype.kind == "c" else [arr]
            for part in parts:
                n = min(part.size, ODD_F4.size)
                part.reshape(-1)[:n] = ODD_F4[:n]
        arrays[a.name] = arr
    return WirePointSet(**{**fields_of(ps), **arrays})


def through_wire(ps: WirePointSet, with_hits: bool = True) -> WirePointSet:
    data = codec.pack(objects.point_set_to_obj(ps, with_hits))
    return objects.point_set_from_obj(codec.unpack(data, max_bytes=BIG))


def same_bits(a: np.ndarray, b: np.ndarray) -> bool:
    return a.dtype == b.dtype and a.shape == b.shape and a.tobytes() == b.tobytes()


def good_obj() -> dict[str, Any]:
    obj: dict[str, Any] = codec.unpack(
        codec.pack(objects.point_set_to_obj(make_point_set(), True)), max_bytes=BIG
    )
    return obj


def fields_of(record: Any) -> dict[str, Any]:
    """Every dataclass field of `record` by name, to build a changed copy."""
    return {name: getattr(record, name) for name in type(record).__dataclass_fields__}
