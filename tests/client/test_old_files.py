"""A rig store and a workstation mirror written by schema 1 keep working with today's code.

The files are `tests/schema/golden/v1/` (written by the code of schema 1, see
tests/schema/old_files.py), copied into a temporary folder first. The rig opens its old store,
serves the old point set as it was stored (the bytes the old mirror holds, so a pull never
takes it for another store's), commits a new one in schema 2 beside it, and the old mirror
pulls the new one and reads both. Arrays are compared bit for bit with the schema 1 values
rounded to today's dtypes (float64 → float32 rounds to nearest: IEEE 754-2008 §5.4.2, numpy's
astype); transfers are checked against SHA-256 (FIPS 180-4) digests (RFC 9530 §2).
"""

from __future__ import annotations

import shutil
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pytest

from schema import golden, old_files  # tests/ is on sys.path (tests/conftest.py)
from taprig.client.mirror import Mirror
from taprig.client.pull import pull
from taprig.client.remote import RigClient
from taprig.daemon.identity import RIG_ID_FILE
from taprig.daemon.records import PointSet, RovingMode
from taprig.daemon.store import FILE_NAME, Store
from taprig.schema import codec, http, pointset, records

from .conftest import ServedRig, serving


def assert_is_schema_1_point_set(ps: pointset.PointSetFields[object]) -> None:
    """`ps` holds golden.wire_point_set()'s values in today's dtypes, bit for bit."""
    ref = golden.wire_point_set()
    for a in pointset.ARRAYS:
        got = np.ascontiguousarray(getattr(ps, a.name))
        assert got.dtype == a.dtype, a.name
        assert got.tobytes() == getattr(ref, a.name).astype(a.dtype).tobytes(), a.name
    assert (ps.test, ps.point, ps.n_averages) == (ref.test, ref.point, ref.n_averages)


@pytest.fixture
def old_rig(tmp_path: Path) -> Iterator[ServedRig]:
    """The real rig and service on a copy of schema 1's store (and its rig id)."""
    data = tmp_path / "rig"
    data.mkdir()
    shutil.copyfile(old_files.STORE, data / FILE_NAME)
    (data / RIG_ID_FILE).write_text(old_files.RIG_ID + "\n")
    with serving(data) as rig:
        yield rig


def test_the_old_store_opens_and_reads_in_todays_dtypes(tmp_path: Path) -> None:
    shutil.copyfile(old_files.STORE, tmp_path / FILE_NAME)
    with Store(tmp_path) as store:
        (summary,) = store.list_point_sets()
        ps = store.get_point_set(summary.id, with_hits=True)
        assert_is_schema_1_point_set(ps)
        # Hit records were float32 SI values in schema 1: unchanged, bit for bit, scale 1.0.
        for i, got in enumerate(ps.hits):
            assert got.data is not None and got.scale is not None
            assert got.data.tobytes() == golden.schema_2_hit_data(i).tobytes()
            assert got.scale.tolist() == [1.0] * got.data.shape[0]
        assert store.stats().schema_version == 3
        digest, body = store.get_wire_body(summary.id, *records.READ_VERSIONS) or ("", b"")
        assert http.digest_matches(digest, body)
        assert codec.unpack(body, max_bytes=1 << 20)["schema"] == 1
        assert store.integrity_check() == "ok"


def test_an_old_mirror_pulls_from_an_old_store_and_reads_both_schemas(
    old_rig: ServedRig, tmp_path: Path
) -> None:
    store = old_rig.running.store
    ref = golden.wire_point_set()
    new = store.commit_point_set(PointSet(
        test=old_files.TEST, point="A1", version=0, roving_mode=RovingMode.HAMMER,
        drive_point="A1", response_labels=ref.response_labels,
        response_points=ref.response_points, n_averages=2, freq_hz=ref.freq_hz,
        h1=ref.h1[:, ::-1], h2=ref.h2, coherence=ref.coherence, gff=ref.gff, gxx=ref.gxx,
        gfx=ref.gfx, hits=(),
    ))  # fmt: skip
    mirror_path = tmp_path / "mirror.sqlite3"
    shutil.copyfile(old_files.MIRROR, mirror_path)
    with Mirror(mirror_path) as mirror:
        (old_id, old_digest), *_ = mirror.digests()
        old_body = mirror.body(old_id)
        with RigClient(old_rig.url, old_rig.token) as client:
            # The rig serves the old point set as stored: the very bytes the mirror holds.
            served = client.point_set_body(old_id)
            assert (served.digest, served.data) == old_body
            report = pull(client, mirror)
        assert (report.point_sets, report.already_here) == (1, 0)
        assert mirror.digests()[0] == (old_id, old_digest)
        assert_is_schema_1_point_set(mirror.point_set(old_id))
        (new_id,) = [i for i, _ in mirror.digests() if i != old_id]
        got = mirror.point_set(new_id)
        assert got.seq == new.seq and got.h1.dtype == pointset.C8
        assert got.h1.tobytes() == ref.h1[:, ::-1].astype(pointset.C8).tobytes()
        _, new_body = mirror.body(new_id)
        assert codec.unpack(new_body, max_bytes=1 << 20)["schema"] == records.SCHEMA_VERSION
        data = mirror.load(old_files.TEST)
        assert sorted(data.points) == ["A1", "D2"]
