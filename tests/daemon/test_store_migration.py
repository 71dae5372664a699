"""A store written at version 2 (hit records float32 SI values, no scale column, schema 2
bodies) opens with today's code: migrated to version 3, its hits read back with the values
they had and a scale of 1.0, its stored bodies served as they were stored."""

from __future__ import annotations

import dataclasses
import json
import sqlite3
from pathlib import Path

import numpy as np
import pytest

from taprig.daemon.api.bodies import encode_point_set
from taprig.daemon.errors import StoreError
from taprig.daemon.records import PointSet, RovingMode, StoredHit
from taprig.daemon.store import FILE_NAME, Store
from taprig.daemon.store import tables as store_tables
from taprig.daemon.wirebody import encode_body
from taprig.schema import codec, http, objects, records

from .test_store import GRID, make_point_set


def as_schema_2_body(body: bytes) -> bytes:
    """The msgpack body schema 2's encoder made of the same point set: its hits had no
    ``scale`` (without raw records, every other field as today)."""
    obj = codec.unpack(body, max_bytes=1 << 24)
    assert all(h["data"] is None and h["scale"] is None for h in obj["hits"])
    obj["schema"] = 2
    for h in obj["hits"]:
        del h["scale"]
    return codec.pack(obj)


def float32_hits(ps: PointSet) -> PointSet:
    """`ps` with its hits' records as schema 2 kept them: float32 SI values."""
    hits = []
    for h in ps.hits:
        si = h.si()
        assert si is not None
        hits.append(dataclasses.replace(h, data=si.astype(np.float32), scale=np.ones(3)))
    return dataclasses.replace(ps, hits=tuple(hits))


def write_version_2_store(folder: Path) -> tuple[PointSet, int]:
    """A store file at version 2, built with SQL: today's store writes it, then its hits lose
    the scale column, its bodies become schema 2 ones and user_version goes back to 2."""
    ps = float32_hits(make_point_set("beam", "P1", 5, n_freq=65, block=256))
    with Store(folder, body_encoder=encode_body) as store:
        store.save_test("beam", GRID, RovingMode.HAMMER, "P1", 3, {"operator": "kim"})
        store.commit_point_set(ps)
        (summary,) = store.list_point_sets()
    conn = sqlite3.connect(folder / FILE_NAME, isolation_level=None)
    try:
        (body,) = conn.execute("SELECT body FROM wire_bodies").fetchone()
        old = as_schema_2_body(body)
        conn.execute(
            "UPDATE wire_bodies SET schema = 2, body = ?, digest = ?",
            (old, http.content_digest(old)),
        )
        conn.execute("ALTER TABLE hits DROP COLUMN scale")
        conn.execute("PRAGMA user_version = 2")
        assert "scale" not in {r[1] for r in conn.execute("PRAGMA table_info(hits)")}
    finally:
        conn.close()
    return ps, summary.id


def test_a_version_2_store_is_migrated_and_reads_back_as_before(tmp_path: Path) -> None:
    """Values compared exactly: float32 records are stored as their bytes, and a float32 value
    times 1.0 is itself (IEEE 754-2008 §5.4.1: multiplication is correctly rounded)."""
    ps, pid = write_version_2_store(tmp_path)
    with Store(tmp_path, body_encoder=encode_body) as store:
        assert store.stats().schema_version == len(store_tables.MIGRATIONS) == 3
        back = store.get_point_set(pid, with_hits=True)
        assert len(back.hits) == len(ps.hits)
        for got, was in zip(back.hits, ps.hits, strict=True):
            assert was.data is not None and got.data is not None and got.scale is not None
            assert got.data.dtype == np.float32 and got.data.tobytes() == was.data.tobytes()
            assert got.scale.tolist() == [1.0, 1.0, 1.0]
            si = got.si()
            assert si is not None and np.array_equal(si, was.data.astype(np.float64))
        # The body stored under schema 2 is served as stored, and reads with scale 1.0.
        digest, body = store.get_wire_body(pid, *records.READ_VERSIONS) or ("", b"")
        assert http.digest_matches(digest, body)
        wire = objects.point_set_from_obj(codec.unpack(body, max_bytes=1 << 24))
        assert wire.hits[0].data is None and wire.hits[0].scale is None
        # A new point set beside it is stored in schema 3, its hits as codes.
        new = store.commit_point_set(make_point_set("beam", "P2", 6, n_freq=65, block=256))
        latest = store.list_point_sets()[-1]
        hits = store.get_point_set(latest.id, with_hits=True).hits
        assert [h.data.dtype.str for h in hits if h.data is not None] == ["<i2", "<i4", "<f4"]
        assert [h.data.dtype.str for h in new.hits if h.data is not None] == ["<i2", "<i4", "<f4"]
        stored = store.get_wire_body(latest.id, records.SCHEMA_VERSION)
        assert stored is not None
        assert store.integrity_check() == "ok"


def test_a_hit_whose_scale_does_not_fit_is_refused_naming_the_field(tmp_path: Path) -> None:
    ps = make_point_set("beam", "P1", 7, n_freq=17, block=64)
    bad_scale = dataclasses.replace(ps.hits[0], scale=np.ones(2))
    float64 = StoredHit(1, "x", True, 1.0, 1.0, (), np.zeros((3, 8)), np.ones(3))
    with Store(tmp_path) as store:
        store.save_test("beam", GRID, RovingMode.HAMMER, "P1", 3, {})
        with pytest.raises(StoreError, match=r"hit 0: scale.shape: \[2\] does not fit a record"):
            store.commit_point_set(dataclasses.replace(ps, hits=(bad_scale,)))
        with pytest.raises(StoreError, match=r"hit 0: data\.dtype: <f8 is not one of <i2, <i4"):
            store.commit_point_set(dataclasses.replace(ps, hits=(float64,)))
        assert store.list_point_sets() == []


def test_the_json_form_carries_codes_as_integers_and_the_scale(tmp_path: Path) -> None:
    """`GET /v1/points/{id}?hits=1` as JSON: a record of codes is a list of integers (exact
    in JSON), its scale a list of floats written as the shortest text that reads back the
    same double (Python's repr)."""
    ps = make_point_set("beam", "P1", 8, n_freq=17, block=32)
    with Store(tmp_path, body_encoder=encode_body) as store:
        store.save_test("beam", GRID, RovingMode.HAMMER, "P1", 3, {})
        store.commit_point_set(ps)
        (summary,) = store.list_point_sets()
        body, media, _digest = encode_point_set(store, summary.id, True, as_msgpack=False)
    assert media == "application/json"
    hits = json.loads(body)["hits"]
    for got, was in zip(hits, ps.hits, strict=True):
        assert was.data is not None and was.scale is not None
        assert got["data"]["dtype"] == was.data.dtype.str
        assert got["data"]["values"] == was.data.tolist()
        assert got["scale"] == {"dtype": "<f8", "shape": [3], "values": was.scale.tolist()}
    assert all(type(v) is int for v in hits[0]["data"]["values"][0])
