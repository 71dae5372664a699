"""Reading the archive as a workstation reads a mirror, plus queries across rigs and tests.

`Archive` has the reading interface of `client.mirror.Mirror` — `tests()`, `test(name)`,
`summaries(test)`, `body(id)`, `point_set(id)`, `point_sets(test)`, `load(test)` →
`TestData`, `counts()`, `digests()`, `rig()` — for one rig of the archive (by name or id,
or the only rig that has the test asked for), so exports, the check and fits take either.
Bodies are the rig's exact bytes: a test loaded from the archive is the test loaded from a
mirror of the same rig, to the byte.

Python API::

    from taprig.client.archive import Archive
    with Archive.open("host=db.lab dbname=taprig user=desk") as archive:
        rows = archive.find(name="bracket%", since="2026-11-01")   # across every rig
        data = archive.load("bracket-A7-2026-12-03")               # TestData
"""

from __future__ import annotations

import json
import os
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import psycopg

from taprig.schema import codec, objects, records

from ..dataset import TestData, assemble
from ..mirror import MAX_BODY
from .db import ArchiveError, connect, explain, require_schema, resolve_dsn

Row = tuple[Any, ...]


@dataclass(frozen=True, slots=True)
class ArchivedTest:
    """A row of `Archive.find`: a test of one rig with what the archive holds of it."""

    rig_id: str
    rig: str
    test: str
    part: str
    created_utc: str
    roving_mode: str
    grid_points: int
    point_sets: int
    last_completed_utc: str | None


class Archive:
    """A read connection to the archive, narrowed to one rig when `rig` is given.

    Not shared between threads; `close()` is idempotent.
    """

    def __init__(self, dsn: str, rig: str | None = None) -> None:
        self.dsn = dsn
        self._conn = connect(dsn)
        try:
            require_schema(self._conn, dsn)
            self._rig_id: str | None = self._find_rig(rig) if rig is not None else None
        except BaseException:
            self._conn.close()
            raise

    @classmethod
    def open(cls, dsn: str | None = None, rig: str | None = None) -> Archive:
        """The archive at `dsn` (None: $TAPRIG_ARCHIVE_DSN)."""
        return cls(resolve_dsn(dsn, os.environ), rig)

    def close(self) -> None:
        self._conn.close()

    def __enter__(self) -> Archive:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def rows(self, query: str, params: Sequence[Any] = (), binary: bool = False) -> list[Row]:
        """The rows of one statement (autocommit: a write is committed on return)."""
        try:
            cur = self._conn.cursor(binary=binary)
            cur.execute(query, params)
            return cur.fetchall() if cur.description else []
        except psycopg.Error as exc:
            raise explain(exc, self.dsn) from None

    def _find_rig(self, which: str) -> str:
        rows = self.rows("SELECT rig_id FROM rigs WHERE rig_id = %s OR name = %s", (which, which))
        if len(rows) == 1:
            return str(rows[0][0])
        if not rows:
            known = ", ".join(f"{n} ({i})" for i, n in self.rows("SELECT rig_id, name FROM rigs"))
            raise ArchiveError(f"the archive has no rig {which!r} (it has: {known or 'none'})")
        raise ArchiveError(f"several archived rigs are called {which!r}; use the id")

    def _locate(self, test: str) -> tuple[str, str, str]:
        """(rig id, rig name, the test's JSON) of `test` on the chosen rig, else on the only
        rig that has it; one query."""
        rows = self.rows(
            "SELECT t.rig_id, r.name, t.body::text FROM tests t JOIN rigs r USING (rig_id) "
            "WHERE t.name = %s AND (%s::text IS NULL OR t.rig_id = %s)",
            (test, self._rig_id, self._rig_id),
        )
        if len(rows) == 1:
            return str(rows[0][0]), str(rows[0][1]), str(rows[0][2])
        if not rows:
            of = "" if self._rig_id is None else " of this rig"
            raise ArchiveError(f"the archive has no test {test!r}{of}")
        rigs = ", ".join(str(r[0]) for r in rows)
        raise ArchiveError(f"test {test!r} is in the archive of several rigs ({rigs}); name one")

    def _rig_of(self, test: str) -> str:
        return self._rig_id if self._rig_id is not None else self._locate(test)[0]

    def _decoded(self, rig_id: str, test: str) -> list[records.WirePointSet]:
        rows = self.rows(
            "SELECT body FROM point_sets WHERE rig_id = %s AND test = %s ORDER BY seq",
            (rig_id, test),
            binary=True,
        )
        return [
            objects.point_set_from_obj(codec.unpack(bytes(r[0]), max_bytes=MAX_BODY)) for r in rows
        ]

    # -- the mirror's interface

    def rig(self, test: str | None = None) -> dict[str, str]:
        """id, name, url of the chosen rig (or of `test`'s rig); empty when neither."""
        if self._rig_id is None and test is None:
            return {}
        rig_id = self._locate(test)[0] if test is not None else self._rig_id
        rows = self.rows("SELECT rig_id, name, url FROM rigs WHERE rig_id = %s", (rig_id,))
        return {"id": str(rows[0][0]), "name": str(rows[0][1]), "url": str(rows[0][2])}

    def tests(self) -> list[records.WireTest]:
        """The tests of the chosen rig (of every rig when none), in change-feed order."""
        where, params = ("WHERE rig_id = %s", (self._rig_id,)) if self._rig_id else ("", ())
        rows = self.rows(f"SELECT body::text FROM tests {where} ORDER BY rig_id, seq", params)
        return [objects.test_from_obj(json.loads(r[0])) for r in rows]

    def test(self, name: str) -> records.WireTest:
        return objects.test_from_obj(json.loads(self._locate(name)[2]))

    def summaries(self, test: str | None = None) -> list[records.WirePointSetSummary]:
        cols = (
            "id, test, point, version, seq, to_char(completed_utc AT TIME ZONE 'UTC', "
            '\'YYYY-MM-DD"T"HH24:MI:SS.US"Z"\'), n_averages'
        )
        if test is not None:
            rows = self.rows(
                f"SELECT {cols} FROM point_sets WHERE rig_id = %s AND test = %s ORDER BY seq",
                (self._rig_of(test), test),
            )
        elif self._rig_id is not None:
            rows = self.rows(
                f"SELECT {cols} FROM point_sets WHERE rig_id = %s ORDER BY seq", (self._rig_id,)
            )
        else:
            raise ArchiveError("name a rig or a test to list point sets of")
        return [
            records.WirePointSetSummary(int(i), t, p, int(v), int(s), c, int(n))
            for i, t, p, v, s, c, n in rows
        ]

    def body(self, point_set_id: int, rig_id: str | None = None) -> tuple[str, bytes]:
        """(Content-Digest, msgpack body) of an archived point set, exactly as the rig served it."""
        rig = rig_id or self._rig_id
        if rig is None:
            raise ArchiveError("point set ids are per rig: name the rig")
        rows = self.rows(
            "SELECT digest, body FROM point_sets WHERE rig_id = %s AND id = %s",
            (rig, point_set_id),
            binary=True,
        )
        if not rows:
            raise ArchiveError(f"the archive has no point set {point_set_id} of rig {rig}")
        return str(rows[0][0]), bytes(rows[0][1])

    def point_set(self, point_set_id: int, rig_id: str | None = None) -> records.WirePointSet:
        _digest, body = self.body(point_set_id, rig_id)
        return objects.point_set_from_obj(codec.unpack(body, max_bytes=MAX_BODY))

    def point_sets(self, test: str) -> list[records.WirePointSet]:
        """Every archived point set of `test` (all versions), decoded, in change-feed order."""
        return self._decoded(self._locate(test)[0], test)

    def load(self, test: str) -> TestData:
        """The test's latest point set per measured point, stacked as arrays (TestData)."""
        rig_id, rig_name, body = self._locate(test)
        plan = objects.test_from_obj(json.loads(body))
        return assemble(plan, self._decoded(rig_id, test), rig_name, rig_id)

    def counts(self) -> dict[str, int]:
        """Point sets archived per test of the chosen rig (of every rig when none)."""
        where, params = ("WHERE rig_id = %s", (self._rig_id,)) if self._rig_id else ("", ())
        rows = self.rows(f"SELECT test, count(*) FROM point_sets {where} GROUP BY test", params)
        return {str(t): int(n) for t, n in rows}

    def digests(self) -> list[tuple[int, str]]:
        """(id, checksum) of every archived point set of the chosen rig, by id."""
        if self._rig_id is None:
            raise ArchiveError("point set ids are per rig: name the rig")
        rows = self.rows(
            "SELECT id, digest FROM point_sets WHERE rig_id = %s ORDER BY id", (self._rig_id,)
        )
        return [(int(i), str(d)) for i, d in rows]

    # -- across the archive

    def find(
        self,
        rig: str | None = None,
        name: str | None = None,
        since: str | None = None,
        until: str | None = None,
        part: str | None = None,
    ) -> list[ArchivedTest]:
        """Tests by rig (name or id), name (SQL LIKE pattern: % and _), creation date
        (ISO 8601 dates or times, since inclusive, until exclusive) and part type."""
        sql = (
            "SELECT t.rig_id, r.name, t.name, t.part, to_char(t.created_utc AT TIME ZONE 'UTC', "
            '\'YYYY-MM-DD"T"HH24:MI:SS"Z"\'), t.roving_mode, t.grid_points, count(p.id), '
            "to_char(max(p.completed_utc) AT TIME ZONE 'UTC', 'YYYY-MM-DD\"T\"HH24:MI:SS\"Z\"') "
            "FROM tests t JOIN rigs r USING (rig_id) LEFT JOIN point_sets p "
            "ON p.rig_id = t.rig_id AND p.test = t.name WHERE true"
        )
        params: list[Any] = []
        for clause, value in (
            ("AND (r.rig_id = %s OR r.name = %s)", rig),
            ("AND t.name LIKE %s", name),
            ("AND t.created_utc >= %s::timestamptz", since),
            ("AND t.created_utc < %s::timestamptz", until),
            ("AND t.part = %s", part),
        ):
            if value is not None:
                sql += " " + clause
                params += [value] * clause.count("%s")
        sql += " GROUP BY t.rig_id, r.name, t.name ORDER BY t.created_utc, t.rig_id, t.name"
        rows = self.rows(sql, params)
        return [
            ArchivedTest(str(a), str(b), str(c), str(d), str(e), str(f), int(g), int(h), i)
            for a, b, c, d, e, f, g, h, i in rows
        ]
