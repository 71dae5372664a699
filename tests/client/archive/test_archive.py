"""The archive on a real PostgreSQL server, fed by real rigs over loopback.

Transfers are checked with SHA-256 (FIPS 180-4) against the rig's Content-Digest (RFC 9530
§2) and by comparing the archived bytes with the bytes in the rig's own store.
"""

from __future__ import annotations

import hashlib
import math
import shutil
from collections.abc import Callable
from pathlib import Path

import numpy as np
import psycopg
import pytest

from schema import old_files  # tests/ is on sys.path (tests/conftest.py)
from taprig.client.archive import Archive, ArchiveError, Archiver, get_model, put_model, trend
from taprig.client.archive.db import SCHEMA_VERSION, migrate, migrations
from taprig.client.archive.store import RigWriter, part_of
from taprig.daemon.store import FILE_NAME
from taprig.schema import http, records

from ..conftest import ServedRig
from .conftest import (
    commit_panel,
    commit_sets,
    config,
    follow_once,
    rig_bodies,
    serve_rig,
    stiffer,
    until,
)
from .pg import PgServer


def archived(dsn: str) -> dict[tuple[str, int], tuple[str, bytes]]:
    """(rig id, point set id) → (digest, body) of everything archived."""
    with psycopg.connect(dsn) as conn:
        rows = conn.execute("SELECT rig_id, id, digest, body FROM point_sets").fetchall()
    return {(r, i): (d, bytes(b)) for r, i, d, b in rows}


def assert_archive_is_rigs(dsn: str, served: list[ServedRig]) -> None:
    """Every point set of every rig is archived once, with the rig's own bytes and digest."""
    held = archived(dsn)
    want = {(r.rig_id, i): body for r in served for i, body in rig_bodies(r).items()}
    assert held.keys() == want.keys()
    for key, (digest, body) in held.items():
        assert (digest, body) == want[key], key
        assert http.digest_matches(digest, body)
    with psycopg.connect(dsn) as conn:
        cursors = dict(conn.execute("SELECT rig_id, cursor FROM rigs").fetchall())
    for r in served:
        assert cursors[r.rig_id] == r.running.store.last_seq()


def test_migrations_are_recorded_once_and_a_newer_archive_is_refused(pg: PgServer) -> None:
    dsn = pg.database("migrations_1")
    first = migrate(dsn)
    assert [m.version for m in first] == list(range(1, SCHEMA_VERSION + 1))
    assert migrate(dsn) == []
    with psycopg.connect(dsn) as conn:
        rows = conn.execute("SELECT version, sha256 FROM archive_migrations").fetchall()
        assert rows == [(m.version, hashlib.sha256(m.text.encode()).hexdigest())
                        for m in migrations()]  # fmt: skip
        conn.execute("INSERT INTO archive_migrations VALUES (99, 'later', 'x')")
    with pytest.raises(ArchiveError, match="upgrade taprig") as err:
        Archive(dsn)
    assert "pw-" not in str(err.value)


def test_three_rigs_into_one_archive_with_two_followers_at_once(
    archive_dsn: str, rigs: Callable[[int], list[ServedRig]]
) -> None:
    served = rigs(3)
    for k, r in enumerate(served):
        commit_sets(r.running, f"plate-{k}", 8 + k, seed=k)
    events: list[dict[str, object]] = []
    a = Archiver(config(archive_dsn, served), events.append).start()
    b = Archiver(config(archive_dsn, served), events.append).start()
    try:
        until(lambda: len(archived(archive_dsn)) == 27, "the first 27 point sets")
        for k, r in enumerate(served):  # more arrive while both follow
            commit_sets(r.running, f"beam-{k}", 3, seed=10 + k)
        until(lambda: len(archived(archive_dsn)) == 36, "all 36 point sets")
    finally:
        a.stop()
        b.stop()
    assert_archive_is_rigs(archive_dsn, served)
    stored = [e for e in events if e["event"] == "stored"]
    assert len(stored) == 36  # each point set stored by exactly one of the two followers
    assert len({(e["rig_id"], e["id"]) for e in stored}) == 36


def test_reader_has_the_mirrors_interface_and_queries_across_rigs(
    archive_dsn: str, rigs: Callable[[int], list[ServedRig]]
) -> None:
    one, two = rigs(2)
    commit_sets(one.running, "bracket-A7-0001", 3, seed=1)
    commit_sets(two.running, "bracket-A7-0002", 2, seed=2)
    commit_sets(two.running, "housing_17", 2, seed=3, meta={"part": "housing-B"})
    follow_once(archive_dsn, [one, two])
    with Archive(archive_dsn) as archive:
        found = archive.find(part="bracket-A7")
        assert [(t.rig, t.test, t.point_sets) for t in found] == [
            ("rig-1", "bracket-A7-0001", 3), ("rig-2", "bracket-A7-0002", 2)]  # fmt: skip
        assert [t.test for t in archive.find(rig="rig-2")] == ["bracket-A7-0002", "housing_17"]
        assert [t.test for t in archive.find(name="housing%")] == ["housing_17"]
        assert [t.part for t in archive.find(name="housing%")] == ["housing-B"]
        assert archive.find(since="2999-01-01") == []
        assert len(archive.find(since="2000-01-01", until="2999-01-01")) == 3
        data = archive.load("bracket-A7-0001")
        assert (
            data.rig == "rig-1" and data.rig_id == one.rig_id and data.points == ("P0", "P1", "P2")
        )
    with Archive(archive_dsn, rig="rig-2") as archive:
        assert [t.name for t in archive.tests()] == ["bracket-A7-0002", "housing_17"]
        assert archive.counts() == {"bracket-A7-0002": 2, "housing_17": 2}
        bodies = rig_bodies(two)
        assert archive.digests() == sorted((i, d) for i, (d, _) in bodies.items())
        for i, want in bodies.items():
            assert archive.body(i) == want
        assert [s.id for s in archive.summaries("housing_17")] == [3, 4]
        with pytest.raises(ArchiveError, match="no test 'nope'"):
            archive.load("nope")


def test_part_type_is_meta_part_else_the_name_without_its_serial() -> None:
    def named(name: str, meta: dict[str, object]) -> records.WireTest:
        return records.WireTest(name, "hammer", "P0", 3, "2026-12-03T00:00:00Z", 1, (), meta)

    assert part_of(named("bracket-A7-2026-12-03", {})) == "bracket-A7"
    assert part_of(named("housing_0017", {})) == "housing"
    assert part_of(named("cover 12:30", {})) == "cover"
    assert part_of(named("anything", {"part": "lid-3"})) == "lid-3"
    assert part_of(named("20261203", {})) == "20261203"


def test_trend_follows_each_peak_of_a_part_type_over_time(
    archive_dsn: str, rigs: Callable[[int], list[ServedRig]]
) -> None:
    """Three daily tests of one panel whose natural frequencies drop 1 % a day (a part
    softening). Truth: the demo panel's Kirchhoff plate frequencies (Leissa, Vibration of
    Plates, 1969, simply supported rectangle) scaled by 1.00, 0.99, 0.98; the check finds
    peaks within 1 % (client/check/'s documented accuracy), so the trend must show each
    first-day peak at scale × f within 1 % and a drift of -2 % ± 1 %."""
    (served,) = rigs(1)
    scales = (1.0, 0.99, 0.98)
    for day, scale in enumerate(scales):
        commit_panel(served.running, f"panel-day{day + 1}", stiffer(scale), {"part": "panel"})
    follow_once(archive_dsn, [served])
    truth = stiffer(1.0).freqs_hz
    with Archive(archive_dsn) as archive:
        result = trend(archive, "panel")
    assert [r.test for r in result.rows] == ["panel-day1", "panel-day2", "panel-day3"]
    assert len(result.reference_hz) >= 2
    for f in result.reference_hz:
        assert np.min(np.abs(truth - f) / truth) < 0.01, f
    for row, scale in zip(result.rows, scales, strict=True):
        for f0, f in zip(result.reference_hz, row.tracked_hz, strict=True):
            assert math.isfinite(f) and abs(f / (f0 * scale) - 1) < 0.01, (row.test, f0, f)
    assert all(abs(d + 0.02) < 0.01 for d in result.drift), result.drift
    assert result.to_dict()["part"] == "panel"


def test_modal_models_are_kept_with_their_digest(
    archive_dsn: str, rigs: Callable[[int], list[ServedRig]]
) -> None:
    (served,) = rigs(1)
    commit_sets(served.running, "plate-1", 2)
    follow_once(archive_dsn, [served])
    npz = b"PK\x03\x04 not really a zip, bytes are bytes" * 100
    with Archive(archive_dsn) as archive:
        first = put_model(archive, "plate-1", npz, {"modes": [{"freq_hz": 66.0}]})
        second = put_model(archive, "plate-1", npz + b"!", {"modes": []})
        got = get_model(archive, "plate-1")
        assert (got.body, got.created) == (npz + b"!", second.created)
        old = get_model(archive, "plate-1", first.created)
        assert old.body == npz and old.summary == {"modes": [{"freq_hz": 66.0}]}
        assert old.digest == hashlib.sha256(npz).hexdigest()
        archive.rows("UPDATE modal_models SET body = %b WHERE created = %s", (b"x", first.created))
        with pytest.raises(ArchiveError, match="fails its checksum"):
            get_model(archive, "plate-1", first.created)
        archive.rows("DELETE FROM modal_models")
        with pytest.raises(ArchiveError, match="no modal model"):
            get_model(archive, "plate-1")
        with pytest.raises(ArchiveError, match="no test"):
            put_model(archive, "no-such-test-anywhere", npz, {})


def test_other_bytes_under_an_archived_key_are_refused_and_the_cursor_stays(
    archive_dsn: str, rigs: Callable[[int], list[ServedRig]]
) -> None:
    """As if the rig's store had been replaced: the archive keeps what it has."""
    (served,) = rigs(1)
    commit_sets(served.running, "plate-1", 3)
    follow_once(archive_dsn, [served])
    with psycopg.connect(archive_dsn) as conn:
        conn.execute("UPDATE point_sets SET digest = 'sha-256=:other:' WHERE id = 2")
        conn.execute("UPDATE rigs SET cursor = 0")
    (state,) = follow_once(archive_dsn, [served]).status()["rigs"]
    assert "differs from the archived one" in str(state["last_error"])
    with psycopg.connect(archive_dsn) as conn:
        cursor = conn.execute("SELECT cursor FROM rigs").fetchone()
        digest = conn.execute("SELECT digest FROM point_sets WHERE id = 2").fetchone()
    seq_of_1 = next(s.seq for s in served.running.store.list_point_sets() if s.id == 1)
    assert cursor == (seq_of_1,) and digest == ("sha-256=:other:",)


def test_a_rig_with_schema_1_bodies_is_archived_as_served(archive_dsn: str, tmp_path: Path) -> None:
    """A rig whose store was written by schema 1 (tests/schema/golden/v1/) and has since
    committed a schema 2 point set: the archive keeps each body as the rig served it, records
    the schema each is written in, and reads both (spectra in today's dtypes)."""
    folder = tmp_path / "old-rig"
    folder.mkdir()
    shutil.copyfile(old_files.STORE, folder / FILE_NAME)
    served = serve_rig(folder, "old-rig")
    try:
        commit_sets(served.running, "plate-new", 1)
        follow_once(archive_dsn, [served])
        assert_archive_is_rigs(archive_dsn, [served])
        with psycopg.connect(archive_dsn) as conn:
            schemas = dict(conn.execute("SELECT id, schema_version FROM point_sets").fetchall())
        assert schemas == {1: 1, 2: records.SCHEMA_VERSION}
        with Archive(archive_dsn) as archive:
            old = archive.load(old_files.TEST)
            new = archive.load("plate-new")
        assert old.h1.shape[-1] == 9 and new.h1.shape[-1] == 4097
        assert old.h1.dtype == new.h1.dtype == np.complex128  # TestData's dtype, both schemas
    finally:
        served.loop.close()
        served.running.close()


def test_a_closed_writer_hands_its_rig_lock_over_at_once(archive_dsn: str) -> None:
    """A follower that closes releases the rig's advisory lock before it returns, so the next
    one takes it at the first try (PostgreSQL docs, "Advisory Locks": a session-level lock is
    held until released explicitly or the session ends, and the server ends a session only
    once it has read the client's goodbye)."""
    for _ in range(20):
        first = RigWriter(archive_dsn, "0123456789ab", "first")
        assert first.try_lock()
        second = RigWriter(archive_dsn, "0123456789ab", "second")
        try:
            assert not second.try_lock()
            first.close()
            assert second.try_lock()
        finally:
            first.close()
            second.close()
