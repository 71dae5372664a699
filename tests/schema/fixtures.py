"""Point sets for the schema's tests: random arrays holding the awkward values a float can."""

from __future__ import annotations

import struct
from typing import Any

import numpy as np

from taprig.schema import codec, objects
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

    return wire_point_set(n_resp, n_freq, n_hits, real=real, cplx=cplx, block=64)


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
