"""A hit's record on the wire (schema 3): the device's codes with their scale, strictly read.

Code ranges of two's-complement integers (int16: -32768..32767; int32) are common practice
(numpy.iinfo); float32 is IEEE 754-2008 binary32 (24-bit significand).
"""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np
import pytest

from taprig.schema import codec, objects, pointset
from taprig.schema.records import SchemaError, WireHit, WirePointSet

from .fixtures import BIG, good_obj, make_point_set, same_bits, through_wire


def with_hits(ps: WirePointSet, *records: tuple[np.ndarray, np.ndarray]) -> WirePointSet:
    hit = ps.hits[0]
    hits = tuple(dataclasses.replace(hit, data=d, scale=s) for d, s in records)
    return dataclasses.replace(ps, hits=hits)


def test_codes_and_scale_travel_bit_for_bit() -> None:
    rng = np.random.default_rng(4)
    scale = np.array([2.0**-15, 9.80665 / 2**15, 1e-6])
    records = [
        (rng.integers(-32768, 32768, (3, 64)).astype("<i2"), scale),
        (rng.integers(-(2**23), 2**23, (3, 64)).astype("<i4"), scale * 2**-8),
        (rng.standard_normal((3, 64)).astype("<f4"), np.ones(3)),
    ]
    back = through_wire(with_hits(make_point_set(), *records))
    for hit, (data, per) in zip(back.hits, records, strict=True):
        assert hit.data is not None and hit.scale is not None
        assert same_bits(hit.data, data) and same_bits(hit.scale, per)
        assert not hit.data.flags.writeable and not hit.scale.flags.writeable
        si = hit.si()
        assert si is not None and np.array_equal(si, data * per[:, None])
    bare = through_wire(with_hits(make_point_set(), *records), with_hits=False)
    assert all(h.data is None and h.scale is None for h in bare.hits)


def hit_obj(**changes: Any) -> dict[str, Any]:
    obj = good_obj()
    obj["hits"][0].update(changes)
    return obj


def array(a: np.ndarray) -> dict[str, Any]:
    return {"dtype": a.dtype.str, "shape": list(a.shape), "data": a.tobytes()}


@pytest.mark.parametrize(
    ("changes", "field", "says"),
    [
        ({"data": array(np.zeros((3, 4), "<f8"))}, "hits[0].data.dtype", "expected <i2 or <i4"),
        ({"data": array(np.zeros((3, 4), "<u2"))}, "hits[0].data.dtype", "is not one of"),
        ({"scale": array(np.ones(2))}, "hits[0].scale.shape", "does not fit a record of 3"),
        ({"scale": array(np.ones(3, "<f4"))}, "hits[0].scale.dtype", "expected <f8, got <f4"),
        ({"scale": array(np.array([1.0, 0.0, 1.0]))}, "hits[0].scale", "finite and positive"),
        ({"scale": None}, "hits[0].scale", "a record needs its scale"),
        ({"data": None}, "hits[0].scale", "given without a record"),
    ],
)
def test_a_bad_record_or_scale_is_refused_naming_the_field(
    changes: dict[str, Any], field: str, says: str
) -> None:
    with pytest.raises(SchemaError, match=says) as err:
        objects.point_set_from_obj(hit_obj(**changes))
    assert err.value.field == field


def test_a_schema_2_body_has_no_scale_and_a_schema_3_body_needs_one() -> None:
    old = good_obj()
    old["schema"] = 2
    with pytest.raises(SchemaError, match="unexpected field") as err:
        objects.point_set_from_obj(old)
    assert err.value.field == "hits[0].scale"
    obj = good_obj()
    del obj["hits"][0]["scale"]
    with pytest.raises(SchemaError, match="missing field") as err:
        objects.point_set_from_obj(obj)
    assert err.value.field == "hits[0].scale"


def test_the_encoder_refuses_a_record_it_cannot_keep() -> None:
    ps = make_point_set()
    for data, scale, field in [
        (np.zeros((3, 8)), np.ones(3), "hits[0].data.dtype"),  # float64: not a record dtype
        (np.zeros((3, 8), "<i2"), None, "hits[0].scale"),
        (np.zeros((3, 8), "<i2"), np.ones((3, 1)), "hits[0].scale.shape"),
    ]:
        hit = WireHit(**{**_fields(ps.hits[0]), "data": data, "scale": scale})
        with pytest.raises(SchemaError) as err:
            objects.point_set_to_obj(dataclasses.replace(ps, hits=(hit,)), True)
        assert err.value.field == field


def _fields(hit: WireHit) -> dict[str, Any]:
    return {f.name: getattr(hit, f.name) for f in dataclasses.fields(hit)}


def test_hit_record_keeps_codes_in_the_narrowest_dtype_the_converter_allows() -> None:
    """rint(SI / scale) gives back the codes a device sent: its SI record is code × scale in
    binary64, whose relative error (2⁻⁵³ a rounding) is far below half a code up to 2³¹."""
    codes = np.array([[-32768, 0, 32767], [5, -5, 1]])
    scale = np.array([1 / 3, 9.80665e-4])
    si = codes * scale[:, None]
    data, per = pointset.hit_record(si, scale, bits=16)
    assert data.dtype == pointset.I2 and np.array_equal(data, codes) and same_bits(per, scale)
    data, _ = pointset.hit_record(si, scale, bits=24)
    assert data.dtype == pointset.I4 and np.array_equal(data, codes)
    wide = codes * 2**16  # beyond int16 though the device claimed 16 bits: kept in int32
    assert pointset.hit_record(wide * scale[:, None], scale, bits=16)[0].dtype == pointset.I4
    big = np.array([[-(2**31), 2**31 - 1]]) * 1e-9
    data, _ = pointset.hit_record(big, np.array([1e-9]), bits=32)
    assert data.tolist() == [[-(2**31), 2**31 - 1]]
    with pytest.raises(ValueError, match="do not fit 32 bits"):
        pointset.hit_record(np.array([[2.0**31]]), np.array([1.0]), bits=32)
    f4, ones = pointset.hit_record(si, None)
    assert f4.dtype == pointset.F4 and same_bits(f4, si.astype("<f4")) and ones.tolist() == [1, 1]


def test_int16_records_take_half_the_bytes_of_float32_ones() -> None:
    """The hit part of a body: 2 bytes a sample (int16) against 4 (binary32), plus a scale of
    8 bytes a channel and the array's small header."""
    rng = np.random.default_rng(9)
    ps = make_point_set(n_hits=3)
    codes = [rng.integers(-32768, 32768, (3, 16384)).astype("<i2") for _ in range(3)]
    scale = np.full(3, 1e-4)
    as_codes = with_hits(ps, *[(c, scale) for c in codes])
    as_float = with_hits(ps, *[((c * scale[:, None]).astype("<f4"), np.ones(3)) for c in codes])
    bare = len(codec.pack(objects.point_set_to_obj(ps, False)))
    n_codes = len(codec.pack(objects.point_set_to_obj(as_codes, True))) - bare
    n_float = len(codec.pack(objects.point_set_to_obj(as_float, True))) - bare
    assert n_codes * 2 <= n_float * 1.01 and n_codes * 2 >= n_float * 0.99
    assert codec.unpack(codec.pack(objects.point_set_to_obj(as_codes, True)), max_bytes=BIG)
