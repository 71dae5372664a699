"""Mirrors and hit records as integer codes with a scale (schema 3).

A mirror keeps each body exactly as the rig served it, so its file needs no migration: a
mirror holding schema 2 bodies with raw hits (float32 SI records, no scale) reads them with
today's code as the same values with a scale of 1.0, and pulls schema 3 bodies beside them.
Transfers are checked against the rig's SHA-256 (FIPS 180-4) Content-Digest (RFC 9530).
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np

from schema import golden  # tests/ is on sys.path (tests/conftest.py)
from taprig.client.mirror import MIRROR_VERSION, Mirror, MirroredPointSet
from taprig.client.pull import pull
from taprig.client.remote import RigClient
from taprig.schema import codec, http, objects, records

from .conftest import ServedRig, commit_synthetic

RIG_ID = "5b0d7f3e-8f0a-4c7e-9d55-0c4a1e2f3b6d"


def write_schema_2_mirror(path: Path) -> tuple[str, bytes]:
    """A mirror that pulled `golden/v2/point-set-hits.msgpack` with its raw hits from a rig of
    schema 2 (the mirror's tables are the same today); (digest, body)."""
    body = (golden.PREVIOUS / "point-set-hits.msgpack").read_bytes()
    test_body = (golden.PREVIOUS / "test.msgpack").read_bytes()
    test = objects.test_from_obj(codec.unpack(test_body, max_bytes=1 << 16))
    ps = objects.point_set_from_obj(codec.unpack(body, max_bytes=1 << 20))
    summary = records.WirePointSetSummary(
        ps.id, ps.test, ps.point, ps.version, ps.seq, ps.completed_utc, ps.n_averages
    )
    digest = http.content_digest(body)
    with Mirror(path) as mirror:
        mirror.bind(RIG_ID, "bay-2-rig", "http://192.0.2.7:8750")
        with mirror.transaction():
            mirror.put_test(test)
            mirror.put_point_set(MirroredPointSet(summary, digest, body, 2))
    return digest, body


def test_a_mirror_of_schema_2_raw_hits_reads_them_as_before(tmp_path: Path) -> None:
    """The float32 records come back bit for bit with a scale of 1.0, so their SI values are
    the values schema 2 stored (float32 → float64 is exact: IEEE 754-2008 §5.4.2)."""
    path = tmp_path / "mirror.sqlite3"
    digest, body = write_schema_2_mirror(path)
    with Mirror(path) as mirror:
        (point_set_id, kept_digest), *_ = mirror.digests()
        assert mirror.body(point_set_id) == (digest, body) and kept_digest == digest
        ps = mirror.point_set(point_set_id)
        golden.assert_schema_2_hits(ps.hits)
        assert [p.id for p in mirror.point_sets(ps.test)] == [point_set_id]
    assert MIRROR_VERSION == 1  # bodies as served: the mirror's tables did not change


def test_raw_int16_hits_arrive_as_codes_with_their_scale(served: ServedRig, tmp_path: Path) -> None:
    """A point set whose hits hold int16 codes: a pull with raw hits brings the codes and the
    scale bit for bit, and the hit part of the body is about half the float32 one (2 bytes
    a sample against binary32's 4, IEEE 754-2008)."""
    store = served.running.store
    commit_synthetic(served.running, "plate-c", 1)
    plain = store.get_point_set(store.list_point_sets("plate-c")[0].id)
    rng = np.random.default_rng(8)
    codes = [rng.integers(-32768, 32768, (3, 4096)).astype(np.int16) for _ in plain.hits]
    scale = np.array([1 / 65536, 9.8 / 131072, 9.8 / 262144])
    hits = tuple(
        dataclasses.replace(h, data=c, scale=scale) for h, c in zip(plain.hits, codes, strict=True)
    )
    store.commit_point_set(dataclasses.replace(plain, version=0, seq=0, hits=hits))
    new_id = store.list_point_sets("plate-c")[-1].id
    with RigClient(served.url, served.token) as client, Mirror(tmp_path / "m.sqlite3") as m:
        pull(client, m, with_hits=True)
        got = m.point_set(new_id)
        for hit, c in zip(got.hits, codes, strict=True):
            assert hit.data is not None and hit.scale is not None
            assert hit.data.dtype == np.int16 and np.array_equal(hit.data, c)
            assert hit.scale.tobytes() == scale.tobytes()
        with_codes = len(m.body(new_id)[1])
    as_float32 = tuple(
        dataclasses.replace(h, data=np.asarray(h.si(), dtype=np.float32), scale=np.ones(3))
        for h in got.hits
    )  # the same records as float32 SI values, as schema 2 kept them
    float_body = codec.pack(
        objects.point_set_to_obj(dataclasses.replace(got, hits=as_float32), True)
    )
    bare = len((store.get_wire_body(new_id, records.SCHEMA_VERSION) or ("", b""))[1])
    assert (with_codes - bare) * 2 <= (len(float_body) - bare) * 1.01
