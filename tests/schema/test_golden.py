"""Today's encoder makes exactly the golden bytes of its schema, and reads schema 1's.

The golden files of schema 2 were written by `golden.py`; those of schema 1 by the code of
schema 1, before the wire module was split. The store keeps bodies
encoded by older code and a client checks every body against the SHA-256 the rig sends, so a
change in any byte breaks either the served bodies or the digests; the wire format changes
only with a new SCHEMA_VERSION. SHA-256: FIPS 180-4 (NIST, 2015), through hashlib.
"""

from __future__ import annotations

import hashlib
import json

import pytest

from taprig.schema import codec, objects, pointset, records

from . import golden

ENCODINGS = golden.encodings()
DIGESTS: dict[str, str] = json.loads(golden.DIGESTS.read_text())


def test_every_encoding_has_a_golden_digest() -> None:
    assert sorted(ENCODINGS) == sorted(DIGESTS)


@pytest.mark.parametrize("name", sorted(DIGESTS))
def test_encoding_is_byte_identical_to_the_golden_one(name: str) -> None:
    data = ENCODINGS[name]
    kept = golden.FOLDER / name
    if kept.exists():
        assert data == kept.read_bytes(), name
    assert hashlib.sha256(data).hexdigest() == DIGESTS[name], name


def test_the_spliced_encoding_is_covered() -> None:
    """The large point set takes the packer's splice path (bins of SPLICE_MIN bytes or more)."""
    ps = golden.wire_point_set(n_resp=2, n_freq=golden.LARGE_F, n_hits=1)
    assert ps.h1.nbytes >= codec.SPLICE_MIN


@pytest.mark.parametrize("name", ["point-set-hits.msgpack", "store-body.msgpack"])
def test_golden_bodies_decode_and_encode_again_to_themselves(name: str) -> None:
    """A body an older rig stored decodes strictly and re-encodes to the same bytes."""
    data = (golden.FOLDER / name).read_bytes()
    ps = objects.point_set_from_obj(codec.unpack(data, max_bytes=len(data)))
    with_hits = all(h.data is not None for h in ps.hits)
    assert codec.pack(objects.point_set_to_obj(ps, with_hits)) == data


V1_BODIES = ["point-set-hits.msgpack", "point-set-bare.msgpack", "store-body.msgpack"]


@pytest.mark.parametrize("name", V1_BODIES)
def test_schema_1_bodies_read_as_todays_dtypes(name: str) -> None:
    """A body of schema 1 (float64 / complex128 spectra) decodes to today's record, each
    array the float32 / complex64 of its schema 1 value: the cast rounds to nearest, as
    IEEE 754-2008 §5.4.2 (formatOf conversions) says, so it is numpy's astype bit for bit."""
    data = (golden.OLD / name).read_bytes()
    obj = codec.unpack(data, max_bytes=len(data))
    assert obj["schema"] == 1
    ps = objects.point_set_from_obj(obj)
    ref = golden.wire_point_set()
    for a in pointset.ARRAYS:
        got, was = getattr(ps, a.name), getattr(ref, a.name)
        assert got.dtype == a.dtype and not got.flags.writeable, a.name
        assert got.tobytes() == was.astype(a.dtype).tobytes(), a.name
    assert [h.trigger_index for h in ps.hits] == [h.trigger_index for h in ref.hits]
    assert (ps.id, ps.version, ps.seq, ps.meta) == (ref.id, ref.version, ref.seq, ref.meta)


@pytest.mark.parametrize("name", V1_BODIES)
def test_schema_2_hits_read_as_float32_with_a_scale_of_one(name: str) -> None:
    """A body of schema 2 (hit records float32 SI values, no scale) decodes with each record's
    values unchanged and a scale of 1.0, so `si()` is the record as schema 2 stored it (a
    float32 → float64 widening is exact: IEEE 754-2008 §5.4.2, every binary32 value is a
    binary64 value); schema 1 wrote the same float32 records."""
    for folder, schema in ((golden.PREVIOUS, 2), (golden.OLD, 1)):
        data = (folder / name).read_bytes()
        obj = codec.unpack(data, max_bytes=len(data))
        assert obj["schema"] == schema
        ps = objects.point_set_from_obj(obj)
        ref = golden.wire_point_set()
        if schema == 2:
            for a in pointset.ARRAYS:
                want = getattr(ref, a.name).astype(a.dtype)
                assert getattr(ps, a.name).tobytes() == want.tobytes(), a.name
        if name == "point-set-hits.msgpack":
            golden.assert_schema_2_hits(ps.hits)
        else:
            assert all(h.data is None and h.scale is None and h.si() is None for h in ps.hits)


@pytest.mark.parametrize("name", ["test.msgpack", "change.msgpack", "summary.json"])
def test_schema_1_tests_changes_and_listings_still_read(name: str) -> None:
    data = (golden.OLD / name).read_bytes()
    obj = json.loads(data) if name.endswith(".json") else codec.unpack(data, max_bytes=1 << 16)
    read = {"test.msgpack": objects.test_from_obj, "change.msgpack": objects.change_from_obj,
            "summary.json": objects.point_set_summary_from_json}[name]  # fmt: skip
    assert obj["schema"] == 1 and read(obj) is not None


def test_a_schema_newer_than_this_side_reads_is_refused() -> None:
    obj = codec.unpack((golden.FOLDER / "test.msgpack").read_bytes(), max_bytes=1 << 16)
    newer = records.SCHEMA_VERSION + 1
    with pytest.raises(records.SchemaError, match=f"schema: schema version {newer} is not one"):
        objects.test_from_obj({**obj, "schema": newer})
