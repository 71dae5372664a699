"""The point-set wire schema: bit-exact round trips, strict decoding, a msgpack codec with limits.

Outside facts the checks rely on, all cited from memory:

- MessagePack specification (msgpack/msgpack, spec.md, "Formats"): bin 8 is ``0xc4``, a
  1-byte length, then the bytes; bin 32 ``0xc6`` and str 32 ``0xdb`` take a 4-byte
  big-endian length; array 32 ``0xdd`` and map 32 ``0xdf`` a 4-byte count; ext 8 ``0xc7``
  (length, type, data), fixext 4 ``0xd6``; type -1 is the timestamp; ``0xc1`` is never used;
  map 16 ``0xde`` takes a 2-byte count; fixmap ``0x80 | n``, fixarray ``0x90 | n``, fixstr
  ``0xa0 | n``, nil ``0xc0``.
- IEEE 754-2019 binary32/binary64 layouts, written little-endian by Python's `struct`
  (Python docs, "struct — Format characters": ``<``, ``f``, ``d``); a complex128 is
  (real, imaginary) binary64 pairs (numpy docs, "Data type objects", complex128).
- FIPS 180-2 (NIST, 2002), Appendix B.1: SHA-256("abc") =
  ba7816bf 8f01cfea 414140de 5dae2223 b00361a3 96177a9c b410ff61 f20015ad.
- RFC 9110 (2022) §12.5.1: the most specific media range that matches a type gives its q;
  q=0 means "not acceptable".
"""

from __future__ import annotations

import contextlib
import copy
import json
import math
import struct
import subprocess
import sys
from typing import Any

import msgpack
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from taprig.schema import wire
from taprig.schema.wire import SchemaError, WireChange, WireHit, WirePointSet, WireTest

ARRAYS = ("freq_hz", "h1", "h2", "coherence", "gff", "gxx", "gfx")
BIG = 1 << 24


def make_point_set(
    n_resp: int = 2, n_freq: int = 33, n_hits: int = 2, seed: int = 1
) -> WirePointSet:
    """Random arrays with the awkward values a float can hold: NaN with a payload, ±inf, -0.0,
    a subnormal."""
    rng = np.random.default_rng(seed)
    odd = np.array([0.0, -0.0, np.inf, -np.inf, 5e-324, np.nan], dtype="<f8")
    odd[5] = np.frombuffer(struct.pack("<Q", 0x7FF8_0000_DEAD_BEEF), "<f8")[0]  # NaN payload

    def real(*shape: int) -> np.ndarray:
        a = rng.standard_normal(shape)
        a.flat[: odd.size] = odd[: a.size]
        return a

    def cplx(*shape: int) -> np.ndarray:
        c = np.empty(shape, dtype="<c16")  # parts set apart: 1j * inf would make a NaN
        c.real, c.imag = real(*shape), real(*shape)[..., ::-1]
        return c

    hits = tuple(
        WireHit(
            trigger_index=4096 * i + 17,
            utc=f"2025-03-04T10:00:{i:02d}.250Z",
            accepted=i % 2 == 0,
            peak_force_n=float(rng.uniform(20, 400)) if i else math.nan,
            pulse_width_s=float(rng.uniform(2e-4, 1e-3)),
            findings=(("double_hit", "a second pulse 3 ms after the first"),) if i else (),
            data=rng.standard_normal((1 + n_resp, 64)).astype("<f4"),
        )
        for i in range(n_hits)
    )
    return WirePointSet(
        id=12,
        test="plate-2025",
        point="C4",
        version=2,
        seq=31,
        completed_utc="2025-03-04T10:00:09.000Z",
        roving_mode="hammer",
        drive_point="C4",
        response_labels=tuple(f"acc{i + 1}" for i in range(n_resp)),
        response_points=tuple(f"B{i + 1}" for i in range(n_resp)),
        n_averages=n_hits,
        freq_hz=np.linspace(0.0, 512.0, n_freq),
        h1=cplx(n_resp, n_freq),
        h2=cplx(n_resp, n_freq),
        coherence=real(n_resp, n_freq),
        gff=real(n_freq),
        gxx=real(n_resp, n_freq),
        gfx=cplx(n_resp, n_freq),
        hits=hits,
        meta={"operator": "kb", "window": {"force_s": 0.002, "tau_s": 0.25}, "tags": [1, "x"]},
    )


def through_wire(ps: WirePointSet, with_hits: bool = True) -> WirePointSet:
    data = wire.pack(wire.point_set_to_obj(ps, with_hits))
    return wire.point_set_from_obj(wire.unpack(data, max_bytes=BIG))


def same_bits(a: np.ndarray, b: np.ndarray) -> bool:
    return a.dtype == b.dtype and a.shape == b.shape and a.tobytes() == b.tobytes()


def good_obj() -> dict[str, Any]:
    obj: dict[str, Any] = wire.unpack(
        wire.pack(wire.point_set_to_obj(make_point_set(), True)), max_bytes=BIG
    )
    return obj


# ---------------------------------------------------------------- round trips


def test_point_set_round_trip_is_bit_identical() -> None:
    """Every array comes back with the same dtype, shape and bytes (NaN payload, -0.0, inf and
    a subnormal included); scalars, hits and meta come back equal."""
    ps = make_point_set()
    back = through_wire(ps)
    for name in ARRAYS:
        assert same_bits(getattr(ps, name), getattr(back, name)), name
    scalars = set(wire._PS_FIELDS) - {*ARRAYS, "hits"}
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
    binary64 (struct); h1 [[1+2j, -0.5-4j, 3j]] as (re, im) binary64 pairs; a hit record as
    binary32. Sources: MessagePack spec (bin 8); IEEE 754 via Python struct; numpy complex128."""
    ps = make_point_set(n_resp=1, n_freq=3, n_hits=1)
    freq = np.array([0.0, 1.5, -2.25])
    h1 = np.array([[1 + 2j, -0.5 - 4j, 3j]])
    rec = np.array([[0.5, -1.0], [2.0, 0.25]], dtype=np.float32)
    ps = WirePointSet(**{**_fields(ps), "freq_hz": freq, "h1": h1,
                         "hits": (WireHit(**{**_fields(ps.hits[0]), "data": rec}),)})  # fmt: skip
    packed = wire.pack(wire.point_set_to_obj(ps, True))
    want_freq = struct.pack("<3d", 0.0, 1.5, -2.25)
    want_h1 = struct.pack("<6d", 1.0, 2.0, -0.5, -4.0, 0.0, 3.0)
    want_rec = struct.pack("<4f", 0.5, -1.0, 2.0, 0.25)
    assert b"\xc4\x18" + want_freq in packed
    assert b"\xc4\x30" + want_h1 in packed
    assert b"\xc4\x10" + want_rec in packed
    obj = wire.point_set_to_obj(ps, True)
    assert obj["freq_hz"] == {"dtype": "<f8", "shape": [3], "data": want_freq}
    assert obj["h1"]["dtype"] == "<c16" and obj["h1"]["shape"] == [1, 3]
    assert obj["hits"][0]["data"]["dtype"] == "<f4"


def _fields(record: Any) -> dict[str, Any]:
    return {name: getattr(record, name) for name in type(record).__dataclass_fields__}


def test_big_endian_and_float32_inputs_are_cast_to_the_wire_dtype() -> None:
    """A big-endian float64 array and a float32 one arrive as <f8 with the same values
    (float32 → float64 is exact: IEEE 754, every binary32 is a binary64)."""
    ps = make_point_set(n_resp=1, n_freq=4)
    be = np.array([1.0, 2.5, -3.0, 1e300], dtype=">f8")
    f32 = np.array([[0.1, 0.2, 0.3, 0.4]], dtype=np.float32)
    back = through_wire(WirePointSet(**{**_fields(ps), "freq_hz": be, "coherence": f32}))
    assert back.freq_hz.dtype == np.dtype("<f8") and back.freq_hz.tolist() == be.tolist()
    assert back.coherence.dtype == np.dtype("<f8")
    assert back.coherence.tolist() == [[float(x) for x in f32[0]]]


def test_without_hits_the_records_stay_home() -> None:
    ps = make_point_set()
    back = through_wire(ps, with_hits=False)
    assert [h.data for h in back.hits] == [None, None]
    assert [h.findings for h in back.hits] == [h.findings for h in ps.hits]
    full = len(wire.pack(wire.point_set_to_obj(ps, True)))
    bare = len(wire.pack(wire.point_set_to_obj(ps, False)))
    assert full - bare >= sum(h.data.nbytes for h in ps.hits if h.data is not None)


def test_empty_point_set_arrays_round_trip() -> None:
    ps = make_point_set(n_resp=0, n_freq=0, n_hits=0)
    back = through_wire(ps)
    assert back.h1.shape == (0, 0) and back.freq_hz.shape == (0,) and back.hits == ()


def test_from_the_daemons_records() -> None:
    """The daemon's PointSet, PointSetSummary, TestPlan and Change fit the schema's protocols
    (tests may import the daemon; the schema itself does not)."""
    from taprig.daemon.records import Finding, GridPoint, PointSet, RovingMode, StoredHit
    from taprig.daemon.store import Change, PointSetSummary, TestPlan

    w = make_point_set(n_hits=1)
    hit = w.hits[0]
    ps = PointSet(
        test=w.test, point=w.point, version=w.version, roving_mode=RovingMode.SENSOR,
        drive_point=w.drive_point, response_labels=w.response_labels,
        response_points=w.response_points, n_averages=w.n_averages, freq_hz=w.freq_hz,
        h1=w.h1, h2=w.h2, coherence=w.coherence, gff=w.gff, gxx=w.gxx, gfx=w.gfx,
        hits=(StoredHit(hit.trigger_index, hit.utc, hit.accepted, hit.peak_force_n,
                        hit.pulse_width_s, (Finding("soft", "weak tap"),), hit.data),),
        meta=w.meta, completed_utc=w.completed_utc, seq=w.seq,
    )  # fmt: skip
    back = through_wire(wire.point_set_from_record(w.id, ps))
    assert back.roving_mode == "sensor" and type(back.roving_mode) is str
    assert back.hits[0].findings == (("soft", "weak tap"),)
    assert same_bits(back.gfx, w.gfx)

    summary = PointSetSummary(5, "plate-2025", "C4", 3, 44, "2025-03-04T10:00:00.000Z", 4)
    js = json.loads(json.dumps(wire.point_set_summary_json(summary)))
    assert wire.point_set_summary_from_json(js) == wire.WirePointSetSummary(
        5, "plate-2025", "C4", 3, 44, "2025-03-04T10:00:00.000Z", 4)  # fmt: skip

    grid = (GridPoint("A1", 0.0, 0.1, 0.0), GridPoint("A2", 0.05, 0.1, 0.0, "-z"))
    plan = TestPlan("plate-2025", grid, RovingMode.HAMMER, "A2", 3, {"k": 1}, "2025-03-01Z", 1)
    t = wire.test_from_obj(json.loads(json.dumps(wire.test_to_obj(wire.test_from_record(plan)))))
    assert t.grid == (("A1", 0.0, 0.1, 0.0, "+z"), ("A2", 0.05, 0.1, 0.0, "-z"))
    assert (t.name, t.roving_mode, t.reference, t.averages, t.meta) == (
        "plate-2025", "hammer", "A2", 3, {"k": 1})  # fmt: skip

    c = wire.change_from_record(Change(9, "point_set", "plate-2025", 5))
    assert wire.change_from_obj(json.loads(json.dumps(wire.change_to_obj(c)))) == c


def test_summary_of_a_wire_point_set() -> None:
    ps = make_point_set()
    s = wire.point_set_summary_from_json(wire.point_set_summary_json(ps))
    assert (s.id, s.seq, s.version, s.n_averages) == (ps.id, ps.seq, ps.version, ps.n_averages)


def test_tests_and_changes_round_trip_through_json_and_msgpack() -> None:
    grid = (("R", 0.0, 0.0, 0.0, "+z"), ("S1", 0.25, 0.0, -0.01, "+x"))
    t = WireTest("beam", "sensor", "R", 5, "2025-03-01T08:00:00.000Z", 3, grid, {"note": "ü"})

    def via_json(o: Any) -> Any:
        return json.loads(json.dumps(o))

    def via_msgpack(o: Any) -> Any:
        return wire.unpack(wire.pack(o), max_bytes=BIG)

    for decode in (via_json, via_msgpack):
        assert wire.test_from_obj(decode(wire.test_to_obj(t))) == t
        for c in (WireChange(3, "test", "beam", None), WireChange(4, "point_set", "beam", 17)):
            assert wire.change_from_obj(decode(wire.change_to_obj(c))) == c


def test_schema_does_not_import_the_daemon() -> None:
    code = (
        "import sys, taprig.schema.wire\n"
        "bad = sorted(m for m in sys.modules if m.startswith(('taprig.daemon', 'taprig.client')))\n"
        "assert not bad, bad\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert out.returncode == 0, out.stderr


# ---------------------------------------------------------------- strict decoding


@pytest.mark.parametrize("name", [*wire._PS_FIELDS, "schema"])
def test_missing_field_is_named(name: str) -> None:
    obj = good_obj()
    del obj[name]
    with pytest.raises(SchemaError, match="missing field") as e:
        wire.point_set_from_obj(obj)
    assert e.value.field == name


@pytest.mark.parametrize("name", wire._HIT_FIELDS)
def test_missing_hit_field_is_named(name: str) -> None:
    obj = good_obj()
    del obj["hits"][1][name]
    with pytest.raises(SchemaError) as e:
        wire.point_set_from_obj(obj)
    assert e.value.field == f"hits[1].{name}"


@pytest.mark.parametrize("where", ["", "hits[0]", "h1"])
def test_extra_field_is_named(where: str) -> None:
    obj = good_obj()
    target = obj if not where else obj["hits"][0] if where.startswith("hits") else obj[where]
    target["colour"] = "blue"
    with pytest.raises(SchemaError, match="unexpected field") as e:
        wire.point_set_from_obj(obj)
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
        (("schema",), 2, "schema"),
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
        wire.point_set_from_obj(obj)
    assert e.value.field == field, str(e.value)
    assert field in str(e.value)


def test_arrays_that_disagree_in_shape_are_refused() -> None:
    """Each array is self-consistent (bytes fit its shape) but gxx has 32 frequencies, not 33."""
    ps = make_point_set()
    bad = WirePointSet(**{**_fields(ps), "gxx": np.zeros((2, 32))})
    with pytest.raises(SchemaError) as e:
        wire.point_set_to_obj(bad, True)
    assert e.value.field == "gxx.shape"
    obj = good_obj()
    obj["gxx"] = wire.array_to_obj(np.zeros((2, 32)), wire.F8, 2, "gxx")
    with pytest.raises(SchemaError) as e:
        wire.point_set_from_obj(obj)
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
    ps = WirePointSet(**{**_fields(make_point_set()), name: value})
    with pytest.raises(SchemaError) as e:
        wire.point_set_to_obj(ps, True)
    assert e.value.field is not None and e.value.field.startswith(name)


def test_an_empty_array_with_an_absurd_dimension_is_refused() -> None:
    obj = good_obj()
    obj["gff"] = {"dtype": "<f8", "shape": [0, 2**62], "data": b""}
    with pytest.raises(SchemaError):
        wire.point_set_from_obj(obj)
    with pytest.raises(SchemaError):
        wire.array_from_obj({"dtype": "<f8", "shape": [0, 2**62], "data": b""}, wire.F8, 2, "a")


def test_decoded_arrays_do_not_alias_a_mutable_buffer() -> None:
    """A bytearray is not accepted as array data: the array could change under the reader."""
    with pytest.raises(SchemaError):
        wire.array_from_obj({"dtype": "<f8", "shape": [1], "data": bytearray(8)}, wire.F8, 1, "a")


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
    good = wire.test_to_obj(t)
    with pytest.raises(SchemaError) as e:
        wire.test_from_obj({**good, **obj})
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
    good = wire.change_to_obj(WireChange(7, "test", "beam", None))
    with pytest.raises(SchemaError) as e:
        wire.change_from_obj({**good, **obj})
    assert e.value.field == field


def test_non_maps_are_refused_at_the_top() -> None:
    for decode in (wire.point_set_from_obj, wire.test_from_obj, wire.change_from_obj,
                   wire.point_set_summary_from_json):  # fmt: skip
        bad: tuple[Any, ...] = (None, [], "x", 3)
        for obj in bad:
            with pytest.raises(SchemaError):
                decode(obj)


# ---------------------------------------------------------------- the msgpack codec


def test_pack_refuses_what_msgpack_cannot_carry() -> None:
    for bad in (object(), np.int64(3), 2**64, {"a": {1, 2}}):
        with pytest.raises(SchemaError):
            wire.pack(bad)


def test_size_limit_is_exact() -> None:
    data = wire.pack({"k": "v" * 100})
    assert wire.unpack(data, max_bytes=len(data)) == {"k": "v" * 100}
    with pytest.raises(SchemaError, match=f"{len(data)} bytes"):
        wire.unpack(data, max_bytes=len(data) - 1)


def test_largest_containers_that_fit_are_accepted() -> None:
    """Limits refuse nothing valid: an array of n one-byte items in n + 3 bytes (array 16),
    and a map whose entries are as small as distinct str keys allow."""
    arr = wire.pack([0] * 1000)
    assert len(arr) == 1003 and wire.unpack(arr, max_bytes=len(arr)) == [0] * 1000
    keys = {chr(0x41 + i): None for i in range(26)}  # 1-char key (2 bytes) + nil (1 byte)
    m = wire.pack(keys)
    assert (
        len(m) == 3 + 3 * 26
    )  # map 16: 0xde and a 2-byte count and wire.unpack(m, max_bytes=len(m)) == keys
    blob = wire.pack(b"\x01" * 300)
    assert wire.unpack(blob, max_bytes=len(blob)) == b"\x01" * 300


@pytest.mark.parametrize(
    ("data", "limit"),
    [
        (b"\xdd\xff\xff\xff\xff", "max_array_len"),  # array 32 of 4 294 967 295 items
        (b"\xdf\xff\xff\xff\xff", "max_map_len"),  # map 32 of 4 294 967 295 pairs
        (b"\x81\xa1k\xdd\x7f\xff\xff\xff", "max_array_len"),  # {"k": array of 2**31 - 1}
        (b"\x92\x00\xdf\x00\x00\x00\x06\xa1a\x00", "max_map_len"),  # 10 bytes; 6 pairs need 12
        (b"\xc6\xff\xff\xff\xff" + b"\x00" * 16, None),  # bin 32 of 4 GiB
        (b"\xdb\xff\xff\xff\xff" + b"a" * 16, None),  # str 32 of 4 GiB
    ],
)
def test_oversized_declarations_are_refused(data: bytes, limit: str | None) -> None:
    """A few bytes that declare more than they hold fail; for containers it is the limit
    derived from the message length that stops them (msgpack names the limit)."""
    with pytest.raises(SchemaError) as e:
        wire.unpack(data, max_bytes=BIG)
    if limit:
        assert limit in str(e.value)


def test_truncated_messages_are_refused() -> None:
    data = wire.pack(wire.point_set_to_obj(make_point_set(), True))
    for cut in sorted({1, 2, 7, 100, len(data) // 2, len(data) - 1}):
        with pytest.raises(SchemaError):
            wire.unpack(data[:cut], max_bytes=BIG)


@pytest.mark.parametrize(
    "data",
    [
        b"",
        b"\xc1",  # never used
        b'{"schema": 1}',  # JSON is not msgpack (0x7b is fixint 123, then extra bytes)
        b"\x01\x02",  # two objects
        b"\xa2\xff\xfe",  # str that is not UTF-8
        b"\x81\x01\x02",  # int map key
        b"\x81\x91\x01\x02",  # array map key
        b"\xc7\x00\x05",  # ext 8 of length 0, type 5
        b"\xd6\xff\x00\x00\x00\x00",  # timestamp 32
        b"\x91" * 5000 + b"\xc0",  # nesting deeper than the unpacker's stack
    ],
)
def test_not_msgpack_of_this_schema(data: bytes) -> None:
    with pytest.raises(SchemaError):
        wire.unpack(data, max_bytes=BIG)


def test_unpack_refuses_non_bytes() -> None:
    with pytest.raises(SchemaError):
        wire.unpack("text", max_bytes=BIG)  # type: ignore[arg-type]


@settings(max_examples=400, deadline=None)
@given(st.binary(max_size=512))
def test_arbitrary_bytes_only_ever_raise_schema_error(data: bytes) -> None:
    try:
        obj = wire.unpack(data, max_bytes=256)
    except SchemaError:
        return
    assert len(data) <= 256
    for decode in (wire.point_set_from_obj, wire.test_from_obj, wire.change_from_obj):
        with contextlib.suppress(SchemaError):
            decode(obj)


GOOD_BYTES = wire.pack(wire.point_set_to_obj(make_point_set(n_freq=5, n_hits=1), True))


@settings(max_examples=300, deadline=None)
@given(st.lists(st.tuples(st.integers(0, len(GOOD_BYTES) - 1), st.integers(0, 255)),
                min_size=1, max_size=6))  # fmt: skip
def test_corrupted_point_sets_only_ever_raise_schema_error(edits: list[tuple[int, int]]) -> None:
    """A valid message with a few bytes changed either decodes to a consistent point set or
    raises SchemaError, never anything else."""
    data = bytearray(GOOD_BYTES)
    for at, value in edits:
        data[at] = value
    try:
        ps = wire.point_set_from_obj(wire.unpack(bytes(data), max_bytes=BIG))
    except SchemaError:
        return
    assert ps.h1.shape == (len(ps.response_labels), ps.freq_hz.shape[0])


def test_decoding_does_not_change_its_input() -> None:
    obj = good_obj()
    before = copy.deepcopy(obj)
    wire.point_set_from_obj(obj)
    assert obj == before


# ---------------------------------------------------------------- negotiation, checksum


@pytest.mark.parametrize(
    ("accept", "msgpack"),
    [
        (None, False),
        ("", False),
        ("*/*", False),  # a tie goes to JSON
        ("application/*", False),
        ("application/json", False),
        (wire.MSGPACK, True),
        (wire.MSGPACK.upper(), True),  # media types compare case-insensitively
        (f"{wire.MSGPACK}, */*", True),  # named beats wildcard at the same q
        (f"{wire.MSGPACK};q=0.5, application/json", False),
        (f"{wire.MSGPACK}; q=0.9, application/json;q=0.8", True),
        (f"{wire.MSGPACK};q=0, */*", False),  # q=0: not acceptable
        (f"application/json;q=0, {wire.MSGPACK};q=0.1", True),
        ("text/html, application/xhtml+xml, */*;q=0.8", False),  # a browser
        ("application/vnd.taprig.v2+msgpack", False),  # another version is another type
        ("garbage;;;, ,", False),
        (f"{wire.MSGPACK};q=abc", False),  # a malformed q: the range is ignored
        (f"{wire.MSGPACK};q=1.5", False),
        (f"{wire.MSGPACK};q=0.001", True),
        (f"{wire.MSGPACK};q=1.000, application/json;q=0.999", True),
    ],
)
def test_wants_msgpack(accept: str | None, msgpack: bool) -> None:
    """RFC 9110 §12.5.1 precedence and q values; our tie rule: JSON."""
    assert wire.wants_msgpack(accept) is msgpack


def test_digest_matches_the_published_sha256_vector() -> None:
    """FIPS 180-2, Appendix B.1: SHA-256 of "abc"."""
    assert wire.digest(b"abc") == (
        "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    )


def test_pack_splices_large_bins_into_exactly_msgpacks_bytes() -> None:
    """wire.pack must equal msgpack.packb (the reference implementation of the msgpack
    spec) byte for byte, large bins included, at and around the splice threshold."""
    rng = np.random.default_rng(5)
    for size in (wire.SPLICE_MIN - 1, wire.SPLICE_MIN, wire.SPLICE_MIN + 1, 3_000_000):
        blob = rng.bytes(size)
        obj = {"a": [1, {"data": blob, "n": "x"}], "b": b"tiny", "c": (blob, memoryview(blob))}
        ref = msgpack.packb(obj, use_bin_type=True)
        assert wire.pack(obj) == ref
        assert wire.unpack(wire.pack(obj), max_bytes=1 << 24)["a"][1]["data"] == blob
