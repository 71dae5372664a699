"""An archive at migration 0001 is migrated to 0002 (the wire schemas, described once) on a
real PostgreSQL server, and reads back what it held, byte for byte.

Bodies are compared byte for byte and checked against their Content-Digest (SHA-256, FIPS
180-4; RFC 9530 §2).
"""

from __future__ import annotations

import json

import psycopg
import pytest

from schema import golden  # tests/ is on sys.path (tests/conftest.py)
from taprig.client.archive import Archive, db
from taprig.client.archive.db import migrate, migrations
from taprig.schema import codec, http, objects, records

from .pg import PgServer

RIG_ID = "5b0d7f3e-8f0a-4c7e-9d55-0c4a1e2f3b6d"


def fill_at_migration_1(dsn: str) -> tuple[int, str, bytes]:
    """A rig, its test and a schema 2 body with raw hits (`golden/v2/`), as a client of
    archive schema 1 stored them (its statements, by SQL); (id, digest, body)."""
    body = (golden.PREVIOUS / "point-set-hits.msgpack").read_bytes()
    ps = objects.point_set_from_obj(codec.unpack(body, max_bytes=1 << 20))
    test_body = (golden.PREVIOUS / "test.msgpack").read_bytes()
    test = objects.test_from_obj(codec.unpack(test_body, max_bytes=1 << 16))
    digest = http.content_digest(body)
    with psycopg.connect(dsn, autocommit=True) as conn:
        conn.execute(
            "INSERT INTO rigs (rig_id, name, url) VALUES (%s, 'bay-2-rig', 'x')", (RIG_ID,)
        )
        conn.execute(
            "INSERT INTO tests (rig_id, name, part, seq, created_utc, roving_mode, reference, "
            "averages, grid_points, body) VALUES (%s, %s, 'bracket', %s, %s, %s, %s, %s, %s, %s)",
            (RIG_ID, test.name, test.seq, test.created_utc, test.roving_mode, test.reference,
             test.averages, len(test.grid), json.dumps(objects.test_to_obj(test))),
        )  # fmt: skip
        conn.execute(
            "INSERT INTO point_sets (rig_id, id, test, point, version, seq, completed_utc, "
            "n_averages, schema_version, digest, size, body) "
            "VALUES (%s, %s, %s, %s, %s, %s, %s, %s, 2, %s, %s, %s)",
            (RIG_ID, ps.id, ps.test, ps.point, ps.version, ps.seq, ps.completed_utc,
             ps.n_averages, digest, len(body), body),
        )  # fmt: skip
    return ps.id, digest, body


def test_an_archive_at_migration_1_is_migrated_to_2_and_reads_back_equal(
    pg: PgServer, monkeypatch: pytest.MonkeyPatch
) -> None:
    dsn = pg.database("migrations_0001")
    first = migrations()[:1]
    monkeypatch.setattr(db, "migrations", lambda: first)
    assert [m.version for m in migrate(dsn)] == [1]
    monkeypatch.undo()
    point_set_id, digest, body = fill_at_migration_1(dsn)
    with pytest.raises(db.ArchiveError, match="run `taprig archive migrate`"):
        Archive(dsn)
    assert [(m.version, m.name) for m in migrate(dsn)] == [(2, "wire_schemas")]
    with Archive(dsn, rig=RIG_ID) as archive:
        assert archive.body(point_set_id) == (digest, body)
        assert http.digest_matches(digest, body)
        golden.assert_schema_2_hits(archive.point_set(point_set_id).hits)
    with psycopg.connect(dsn) as conn:
        described = {v for (v,) in conn.execute("SELECT version FROM wire_schemas")}
        assert described >= records.READ_VERSIONS  # every schema a client reads has its row
        with pytest.raises(psycopg.errors.ForeignKeyViolation):
            conn.execute("UPDATE point_sets SET schema_version = %s", (max(described) + 1,))
