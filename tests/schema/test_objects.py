"""Records ↔ plain objects (schema.objects): bit-exact round trips and strict decoding.

Outside facts the checks rely on, all cited from memory:

- MessagePack specification (msgpack/msgpack, spec.md, "Formats"): bin 8 is ``0xc4``, a
  1-byte length, then the bytes.
- IEEE 754-2019 binary32/binary64 layouts, written little-endian by Python's `struct`
  (Python docs, "struct — Format characters": ``<``, ``f``, ``d``); a complex128 is
  (real, imaginary) binary64 pairs (numpy docs, "Data type objects", complex128).
"""

from __future__ import annotations

import copy
import json
import math
import struct
from typing import Any

import numpy as np
import pytest

from taprig.schema import codec, objects, pointset
from taprig.schema.records import SchemaError, WireChange, WireHit, WirePointSet, WireTest

from .fixtures import ARRAYS, BIG, fields_of, good_obj, make_point_set, same_bits, through_wire


def test_point_set_round_trip_is_bit_identical() -> None:
    """Every array comes back with the same dtype, shape and bytes (NaN payload, -0.0, inf and
    a subnormal included); scalars, hits and meta come back equal."""
    ps = make_point_set()
    back = through_wire(ps)
    for name in ARRAYS:
        assert same_bits(getattr(ps, name), getattr(back, name)), name
    scalars = set(objects._PS_FIELDS) - {*ARRAYS, "hits"}
    for name in sorted(scalars):
        assert getattr(back, name) == getattr(ps, name), name
    assert len(back.hits) == len(ps.hits)
    for h0, h1 in zip(ps.hits, back.hits, strict=True):
        assert h0.data is not None and h1.data is not None
        assert same_bits(h0.data, h1.data)
        assert (h1.trigger_index, h1.utc, h1.accepted, h1.findings) == (
            h0.trigger_index, h0.utc, h0.accepted, h0.findings)  # fmt: skip
        assert struct.pack("<d", h1.peak_force_n) == struct.pack("<d", h0.peak_force_n)
        assert h1.pulse_width_s == h0.pulse_width_s


def test_decoded_arrays_are_read_only() -> None:
    back = through_wire(make_point_set())
    for arr in [getattr(back, n) for n in ARRAYS] + [h.data for h in back.hits]:
        assert arr is not None and not arr.flags.writeable
        with pytest.raises(ValueError, match="read-only"):
            arr.flat[0] = 1


def test_array_bytes_on_the_wire_follow_msgpack_and_ieee754() -> None:
    """freq_hz [0, 1.5, -2.25] goes out as bin 8 of 24 bytes holding three little-endian
    binary64 (struct); h1 [[1+2j, -0.5-4j, 3j]] as (re, im) binary32 pairs (schema 2); a hit
    record as binary32. Sources: MessagePack spec (bin 8); IEEE 754 via Python struct; numpy
    complex64 (two binary32, real part first)."""
    ps = make_point_set(n_resp=1, n_freq=3, n_hits=1)
    freq = np.array([0.0, 1.5, -2.25])
    h1 = np.array([[1 + 2j, -0.5 - 4j, 3j]])
    rec = np.array([[0.5, -1.0], [2.0, 0.25]], dtype=np.float32)
    ps = WirePointSet(**{**fields_of(ps), "freq_hz": freq, "h1": h1,
                         "hits": (WireHit(**{**fields_of(ps.hits[0]), "data": rec}),)})  # fmt: skip
    packed = codec.pack(objects.point_set_to_obj(ps, True))
    want_freq = struct.pack("<3d", 0.0, 1.5, -2.25)
    want_h1 = struct.pack("<6f", 1.0, 2.0, -0.5, -4.0, 0.0, 3.0)
    want_rec = struct.pack("<4f", 0.5, -1.0, 2.0, 0.25)
    assert b"\xc4\x18" + want_freq in packed
    assert b"\xc4\x18" + want_h1 in packed
    assert b"\xc4\x10" + want_rec in packed
    obj = objects.point_set_to_obj(ps, True)
    assert obj["freq_hz"] == {"dtype": "<f8", "shape": [3], "data": want_freq}
    assert obj["h1"]["dtype"] == "<c8" and obj["h1"]["shape"] == [1, 3]
    assert obj["hits"][0]["data"]["dtype"] == "<f4"


def test_big_endian_float64_inputs_are_cast_to_the_wire_dtype() -> None:
    """A big-endian float64 array arrives as <f8 with the same values; a float64 coherence as
    <f4, each value rounded to the nearest binary32 (IEEE 754-2008 §4.3.1, roundTiesToEven;
    struct's "<f" packs the same way)."""
    ps = make_point_set(n_resp=1, n_freq=4)
    be = np.array([1.0, 2.5, -3.0, 1e300], dtype=">f8")
    f64 = np.array([[0.1, 0.2, 0.3, 1 / 3]])
    back = through_wire(WirePointSet(**{**fields_of(ps), "freq_hz": be, "coherence": f64}))
    assert back.freq_hz.dtype == np.dtype("<f8") and back.freq_hz.tolist() == be.tolist()
    assert back.coherence.dtype == np.dtype("<f4")
    assert back.coherence.tobytes() == struct.pack("<4f", 0.1, 0.2, 0.3, 1 / 3)
    # binary32 keeps a 24-bit significand: the rounding error is at most 2**-24 relative.
    assert np.all(np.abs(back.coherence - f64) <= 2.0**-24 * np.abs(f64))


def test_without_hits_the_records_stay_home() -> None:
    ps = make_point_set()
    back = through_wire(ps, with_hits=False)
    assert [h.data for h in back.hits] == [None, None]
    assert [h.findings for h in back.hits] == [h.findings for h in ps.hits]
    full = len(codec.pack(objects.point_set_to_obj(ps, True)))
    bare = len(codec.pack(objects.point_set_to_obj(ps, False)))
    assert full - bare >= sum(h.data.nbytes for h in ps.hits if h.data is not None)


def test_empty_point_set_arrays_round_trip() -> None:
    ps = make_point_set(n_resp=0, n_freq=0, n_hits=0)
    back = through_wire(ps)
    assert back.h1.shape == (0, 0) and back.freq_hz.shape == (0,) and back.hits == ()


def test_summary_of_a_wire_point_set() -> None:
    ps = make_point_set()
    s = objects.point_set_summary_from_json(objects.point_set_summary_json(ps))
    assert (s.id, s.seq, s.version, s.n_averages) == (ps.id, ps.seq, ps.version, ps.n_averages)


def test_tests_and_changes_round_trip_through_json_and_msgpack() -> None:
    grid = (("R", 0.0, 0.0, 0.0, "+z"), ("S1", 0.25, 0.0, -0.01, "+x"))
    t = WireTest("beam", "sensor", "R", 5, "2025-03-01T08:00:00.000Z", 3, grid, {"note": "ü"})

    def via_json(o: Any) -> Any:
        return json.loads(json.dumps(o))

    def via_msgpack(o: Any) -> Any:
        return codec.unpack(codec.pack(o), max_bytes=BIG)

    for decode in (via_json, via_msgpack):
        assert objects.test_from_obj(decode(objects.test_to_obj(t))) == t
        for c in (WireChange(3, "test", "beam", None), WireChange(4, "point_set", "beam", 17)):
            assert objects.change_from_obj(decode(objects.change_to_obj(c))) == c


# ---------------------------------------------------------------- strict decoding


@pytest.mark.parametrize("name", [*objects._PS_FIELDS, "schema"])
def test_missing_field_is_named(name: str) -> None:
    obj = good_obj()
    del obj[name]
    with pytest.raises(SchemaError, match="missing field") as e:
        objects.point_set_from_obj(obj)
    assert e.value.field == name


@pytest.mark.parametrize("name", objects._HIT_FIELDS)
def test_missing_hit_field_is_named(name: str) -> None:
    obj = good_obj()
    del obj["hits"][1][name]
    with pytest.raises(SchemaError) as e:
        objects.point_set_from_obj(obj)
    assert e.value.field == f"hits[1].{name}"


@pytest.mark.parametrize("where", ["", "hits[0]", "h1"])
def test_extra_field_is_named(where: str) -> None:
    obj = good_obj()
    target = obj if not where else obj["hits"][0] if where.startswith("hits") else obj[where]
    target["colour"] = "blue"
    with pytest.raises(SchemaError, match="unexpected field") as e:
        objects.point_set_from_obj(obj)
    assert e.value.field == (f"{where}.colour" if where else "colour")


@pytest.mark.parametrize(
    ("path", "value", "field"),
    [
        (("h1", "dtype"), "<f8", "h1.dtype"),  # a real array where complex is due
        (("freq_hz", "dtype"), "<f4", "freq_hz.dtype"),
        (("coherence", "dtype"), ">f8", "coherence.dtype"),  # not little-endian
        (("gff", "dtype"), "|O", "gff.dtype"),  # object arrays never
        (("gff", "dtype"), "<i8", "gff.dtype"),
        (("gff", "dtype"), 8, "gff.dtype"),
        (("hits", 0, "data", "dtype"), "<f8", "hits[0].data.dtype"),
        (("h2", "shape"), [2, 34], "h2.data"),  # bytes for 2 × 33, not 2 × 34
        (("h2", "shape"), [2, -33], "h2.shape[1]"),
        (("h2", "shape"), [66], "h2.shape"),  # right size, wrong number of dimensions
        (("h2", "shape"), [2, 33.0], "h2.shape[1]"),
        (("h2", "shape"), "2x33", "h2.shape"),
        (("h2", "data"), "not bytes", "h2.data"),
        (("h2", "data"), b"\x00" * 7, "h2.data"),
        (("h2",), [1, 2, 3], "h2"),
        (("schema",), 4, "schema"),
        (("schema",), True, "schema"),
        (("id",), True, "id"),
        (("id",), -1, "id"),
        (("version",), 0, "version"),
        (("seq",), 1.0, "seq"),
        (("test",), b"plate", "test"),
        (("point",), "", "point"),
        (("roving_mode",), "bicycle", "roving_mode"),
        (("response_labels",), "acc1", "response_labels"),
        (("response_points",), ["B1"], "response_points"),  # 1 point for 2 labels
        (("meta",), [], "meta"),
        (("meta", "k"), math.nan, "meta.k"),  # plain JSON has no NaN
        (("meta", "k"), b"\x00", "meta.k"),
        (("hits",), {}, "hits"),
        (("hits", 0, "accepted"), 1, "hits[0].accepted"),
        (("hits", 0, "peak_force_n"), "12 N", "hits[0].peak_force_n"),
        (("hits", 1, "findings", 0), ["code"], "hits[1].findings[0]"),
        (("hits", 1, "findings", 0, 1), 3, "hits[1].findings[0][1]"),
    ],
)
def test_bad_value_is_named(path: tuple[Any, ...], value: Any, field: str) -> None:
    obj = good_obj()
    target = obj
    for key in path[:-1]:
        target = target[key]
    target[path[-1]] = value
    with pytest.raises(SchemaError) as e:
        objects.point_set_from_obj(obj)
    assert e.value.field == field, str(e.value)
    assert field in str(e.value)


def test_arrays_that_disagree_in_shape_are_refused() -> None:
    """Each array is self-consistent (bytes fit its shape) but gxx has 32 frequencies, not 33."""
    ps = make_point_set()
    bad = WirePointSet(**{**fields_of(ps), "gxx": np.zeros((2, 32))})
    with pytest.raises(SchemaError) as e:
        objects.point_set_to_obj(bad, True)
    assert e.value.field == "gxx.shape"
    obj = good_obj()
    obj["gxx"] = objects.array_to_obj(np.zeros((2, 32)), pointset.F4, 2, "gxx")
    with pytest.raises(SchemaError) as e:
        objects.point_set_from_obj(obj)
    assert e.value.field == "gxx.shape"


@pytest.mark.parametrize(
    ("name", "value"),
    [
        ("coherence", np.array([[None, 1.0]], dtype=object)),  # object dtype
        ("coherence", np.ones((2, 33), dtype=complex)),  # complex into a real field
        ("freq_hz", np.array(["1", "2"])),
        ("freq_hz", np.zeros((1, 33))),  # 2-D where 1-D is due
        ("h1", [[1.0, 2.0], [3.0]]),  # ragged
    ],
)
def test_encoder_refuses_what_the_decoder_would(name: str, value: Any) -> None:
    ps = WirePointSet(**{**fields_of(make_point_set()), name: value})
    with pytest.raises(SchemaError) as e:
        objects.point_set_to_obj(ps, True)
    assert e.value.field is not None and e.value.field.startswith(name)


def test_an_empty_array_with_an_absurd_dimension_is_refused() -> None:
    obj = good_obj()
    obj["gff"] = {"dtype": "<f8", "shape": [0, 2**62], "data": b""}
    with pytest.raises(SchemaError):
        objects.point_set_from_obj(obj)
    with pytest.raises(SchemaError):
        objects.array_from_obj(
            {"dtype": "<f8", "shape": [0, 2**62], "data": b""}, pointset.F8, 2, "a"
        )


def test_decoded_arrays_do_not_alias_a_mutable_buffer() -> None:
    """A bytearray is not accepted as array data: the array could change under the reader."""
    with pytest.raises(SchemaError):
        objects.array_from_obj(
            {"dtype": "<f8", "shape": [1], "data": bytearray(8)}, pointset.F8, 1, "a"
        )


@pytest.mark.parametrize(
    ("obj", "field"),
    [
        ({"grid": []}, "grid"),
        ({"grid": [["A", 0.0, 0.0, 0.0, "+z"], ["A", 1.0, 0.0, 0.0, "+z"]]}, "grid[1][0]"),
        ({"grid": [["A", 0.0, math.inf, 0.0, "+z"]], "reference": "A"}, "grid[0][2]"),
        ({"grid": [["A", 0.0, 0.0, 0.0, "up"]], "reference": "A"}, "grid[0][4]"),
        ({"grid": [["A", 0.0, 0.0, 0.0]], "reference": "A"}, "grid[0]"),
        ({"reference": "nowhere", "roving_mode": "sensor"}, "reference"),  # hammer: any place
        ({"averages": 0}, "averages"),
        ({"roving_mode": "HAMMER"}, "roving_mode"),
        ({"extra": 1}, "extra"),
    ],
)
def test_bad_test_objects_are_named(obj: dict[str, Any], field: str) -> None:
    t = WireTest("beam", "hammer", "R", 3, "2025-03-01T08:00:00Z", 1, (("R", 0.0, 0.0, 0.0, "+z"),))
    good = objects.test_to_obj(t)
    with pytest.raises(SchemaError) as e:
        objects.test_from_obj({**good, **obj})
    assert e.value.field == field


@pytest.mark.parametrize(
    ("obj", "field"),
    [
        ({"kind": "test", "point_set_id": 4}, "point_set_id"),
        ({"kind": "point_set", "point_set_id": None}, "point_set_id"),
        ({"kind": "hit"}, "kind"),
        ({"seq": "7"}, "seq"),
    ],
)
def test_bad_changes_are_named(obj: dict[str, Any], field: str) -> None:
    good = objects.change_to_obj(WireChange(7, "test", "beam", None))
    with pytest.raises(SchemaError) as e:
        objects.change_from_obj({**good, **obj})
    assert e.value.field == field


def test_non_maps_are_refused_at_the_top() -> None:
    for decode in (objects.point_set_from_obj, objects.test_from_obj, objects.change_from_obj,
                   objects.point_set_summary_from_json):  # fmt: skip
        bad: tuple[Any, ...] = (None, [], "x", 3)
        for obj in bad:
            with pytest.raises(SchemaError):
                decode(obj)


def test_decoding_does_not_change_its_input() -> None:
    obj = good_obj()
    before = copy.deepcopy(obj)
    objects.point_set_from_obj(obj)
    assert obj == before


def test_every_plain_field_has_exactly_one_rule() -> None:
    """The rules cover the declared scalars of a point set and a hit, plus the store id, and
    nothing else: a field added to schema.pointset without a rule fails here."""
    assert set(objects._RULES) == {"id", *pointset.SCALARS, *pointset.HIT_SCALARS}
