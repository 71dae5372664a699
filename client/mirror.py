"""The local mirror of one rig: its tests and completed point sets, readable offline.

One SQLite file per rig (64 KiB pages, rollback journal, synchronous=FULL). A point set is
kept as the exact msgpack body the rig served (and whose checksum was verified), so a mirror
is bit for bit the rig's data, and two mirrors of one rig hold identical bytes. Writes happen in
transactions that also move the pull cursor, so a pull killed at any moment leaves either
the whole of a batch or none of it: running it again neither repeats nor misses anything.

Python API::

    from taprig.client import Mirror
    with Mirror.open_rig("bench-rig") as m:      # a paired rig's mirror, by name or id
        data = m.load("bracket-1")               # TestData: freq_hz, h1 (P, R, F), ...
        print(data.points, abs(data.h1).max())

Tables: ``rig`` (key → value: id, name, url), ``cursor`` (name → seq: '' is the change
feed position of whole pulls), ``tests`` (name, seq, JSON object per the wire schema),
``point_sets`` (id, test, point, version, seq, completed_utc, n_averages, digest, body).
"""

from __future__ import annotations

import contextlib
import json
import os
import sqlite3
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Final

from taprig.schema import codec, objects, records

from .dataset import TestData, assemble
from .errors import MirrorError

if TYPE_CHECKING:
    from .rigs import Places

MIRROR_VERSION: Final = 1
MAX_BODY: Final = 256 << 20  # bytes: largest point-set body read back
PAGE_SIZE: Final = 65536  # bytes, SQLite's largest page

_SCHEMA: Final = """
CREATE TABLE IF NOT EXISTS rig (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS cursor (name TEXT PRIMARY KEY, seq INTEGER NOT NULL);
CREATE TABLE IF NOT EXISTS tests (
    name TEXT PRIMARY KEY, seq INTEGER NOT NULL, body TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS point_sets (
    id INTEGER PRIMARY KEY, test TEXT NOT NULL, point TEXT NOT NULL,
    version INTEGER NOT NULL, seq INTEGER NOT NULL UNIQUE, completed_utc TEXT NOT NULL,
    n_averages INTEGER NOT NULL, digest TEXT NOT NULL, body BLOB NOT NULL
);
CREATE INDEX IF NOT EXISTS point_sets_by_test ON point_sets (test, point, version);
"""


@dataclass(frozen=True, slots=True)
class MirroredPointSet:
    """A point set as received: its summary fields, the rig's checksum, the body bytes and
    the wire schema version the body is written in (older rigs' bodies stay as served)."""

    summary: records.WirePointSetSummary
    digest: str
    body: bytes
    schema: int = records.SCHEMA_VERSION


class Mirror:
    """One rig's local store. Not shared between threads; `close()` is idempotent."""

    def __init__(self, path: str | os.PathLike[str]) -> None:
        self.path = path = Path(path)
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
            self._db = sqlite3.connect(path, isolation_level=None, check_same_thread=False)
            # Large pages: a point set of a few MB is a few dozen pages. Rollback journal, not
            # WAL: a pull appends new pages, which a rollback journal does not copy, while WAL
            # writes every byte twice (log, then checkpoint). Durable at each commit (FULL).
            self._db.execute(f"PRAGMA page_size={PAGE_SIZE}")  # takes effect in a new file
            self._db.execute("PRAGMA journal_mode=DELETE")
            self._db.execute("PRAGMA synchronous=FULL")
            self._db.execute("PRAGMA busy_timeout=10000")
            version = self._db.execute("PRAGMA user_version").fetchone()[0]
            if version not in (0, MIRROR_VERSION):
                raise MirrorError(
                    f"{path} is a mirror of version {version}; this client reads version "
                    f"{MIRROR_VERSION}: pull into a new mirror"
                )
            self._db.executescript(_SCHEMA)
            self._db.execute(f"PRAGMA user_version={MIRROR_VERSION}")
        except sqlite3.Error as exc:
            raise MirrorError(f"cannot open the mirror {path}: {exc}") from None
        self._closed = False

    @classmethod
    def open_rig(cls, which: str | None = None, places: Places | None = None) -> Mirror:
        """The mirror of a paired rig, by name or id (the only one when None)."""
        from .rigs import Places, RigBook

        where = places if places is not None else Places.from_env()
        rig = RigBook(where).find(which)
        return cls(where.mirror_path(rig.rig_id))

    def close(self) -> None:
        if not self._closed:
            self._closed = True
            self._db.close()

    def __enter__(self) -> Mirror:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    @contextlib.contextmanager
    def transaction(self) -> Iterator[None]:
        """BEGIN IMMEDIATE … COMMIT, rolled back on any error."""
        try:
            self._db.execute("BEGIN IMMEDIATE")
        except sqlite3.Error as exc:
            raise MirrorError(f"{self.path}: {exc}") from None
        try:
            yield
        except BaseException:
            self._db.execute("ROLLBACK")
            raise
        try:
            self._db.execute("COMMIT")
        except sqlite3.Error as exc:
            with contextlib.suppress(sqlite3.Error):
                self._db.execute("ROLLBACK")
            raise MirrorError(f"{self.path}: the batch was not stored: {exc}") from None

    # -- identity

    def rig(self) -> dict[str, str]:
        """What the mirror knows of its rig: id, name, url (empty before the first pull)."""
        return {k: v for k, v in self._db.execute("SELECT key, value FROM rig")}

    def bind(self, rig_id: str, name: str, url: str) -> None:
        """Tie the mirror to a rig; MirrorError if it already mirrors another one."""
        known = self.rig().get("id")
        if known is not None and known != rig_id:
            raise MirrorError(f"{self.path} mirrors rig {known}, not {rig_id}")
        with self.transaction():
            for key, value in (("id", rig_id), ("name", name), ("url", url)):
                self._db.execute("INSERT OR REPLACE INTO rig VALUES (?, ?)", (key, value))

    # -- writing (inside `transaction()`)

    def cursor(self, name: str = "") -> int:
        row = self._db.execute("SELECT seq FROM cursor WHERE name = ?", (name,)).fetchone()
        return int(row[0]) if row else 0

    def set_cursor(self, seq: int, name: str = "") -> None:
        self._db.execute("INSERT OR REPLACE INTO cursor VALUES (?, ?)", (name, seq))

    def put_test(self, test: records.WireTest) -> None:
        body = json.dumps(objects.test_to_obj(test), separators=(",", ":"))
        self._db.execute(
            "INSERT OR REPLACE INTO tests VALUES (?, ?, ?)", (test.name, test.seq, body)
        )

    def put_point_set(self, ps: MirroredPointSet) -> bool:
        """Store a point set; False if it was already here (same id and checksum).

        MirrorError when the id is here with other bytes: the rig's store is no longer the
        one this mirror follows, and nothing is overwritten.
        """
        s = ps.summary
        row = self._db.execute("SELECT digest FROM point_sets WHERE id = ?", (s.id,)).fetchone()
        if row is not None:
            if row[0] != ps.digest:
                raise MirrorError(
                    f"point set {s.id} ({s.test}/{s.point}) on the rig differs from the mirrored "
                    f"one: the rig's store was replaced; pull into a new mirror"
                )
            return False
        self._db.execute(
            "INSERT INTO point_sets VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (s.id, s.test, s.point, s.version, s.seq, s.completed_utc, s.n_averages,
             ps.digest, ps.body),
        )  # fmt: skip
        return True

    # -- reading

    def has_point_set(self, point_set_id: int) -> bool:
        sql = "SELECT 1 FROM point_sets WHERE id = ?"
        return self._db.execute(sql, (point_set_id,)).fetchone() is not None

    def tests(self) -> list[records.WireTest]:
        rows = self._db.execute("SELECT body FROM tests ORDER BY seq")
        return [objects.test_from_obj(json.loads(r[0])) for r in rows]

    def test(self, name: str) -> records.WireTest:
        row = self._db.execute("SELECT body FROM tests WHERE name = ?", (name,)).fetchone()
        if row is None:
            known = ", ".join(t.name for t in self.tests()) or "none yet"
            raise MirrorError(f"the mirror has no test {name!r} (it has: {known}); pull first")
        return objects.test_from_obj(json.loads(row[0]))

    def summaries(self, test: str | None = None) -> list[records.WirePointSetSummary]:
        sql = "SELECT id, test, point, version, seq, completed_utc, n_averages FROM point_sets"
        rows = self._db.execute(
            sql + (" WHERE test = ? ORDER BY seq" if test else " ORDER BY seq"),
            (test,) if test else (),
        )
        return [records.WirePointSetSummary(*r) for r in rows]

    def body(self, point_set_id: int) -> tuple[str, bytes]:
        """(Content-Digest, msgpack body) of a mirrored point set, exactly as received."""
        sql = "SELECT digest, body FROM point_sets WHERE id = ?"
        row = self._db.execute(sql, (point_set_id,)).fetchone()
        if row is None:
            raise MirrorError(f"the mirror has no point set {point_set_id}")
        return str(row[0]), bytes(row[1])

    def point_set(self, point_set_id: int) -> records.WirePointSet:
        _digest, body = self.body(point_set_id)
        return objects.point_set_from_obj(codec.unpack(body, max_bytes=MAX_BODY))

    def point_sets(self, test: str) -> list[records.WirePointSet]:
        return [self.point_set(s.id) for s in self.summaries(test)]

    def load(self, test: str) -> TestData:
        """The test's latest point set per measured point, stacked as arrays (TestData)."""
        rig = self.rig()
        return assemble(
            self.test(test), self.point_sets(test), rig.get("name", ""), rig.get("id", "")
        )

    def counts(self) -> dict[str, int]:
        """Point sets mirrored per test."""
        rows = self._db.execute("SELECT test, count(*) FROM point_sets GROUP BY test")
        return {str(t): int(n) for t, n in rows}

    def digests(self) -> Sequence[tuple[int, str]]:
        """(id, checksum) of every mirrored point set, by id (to compare mirrors)."""
        return [(int(i), str(d)) for i, d in self._db.execute(
            "SELECT id, digest FROM point_sets ORDER BY id")]  # fmt: skip
