"""Reading the store: one read-only connection per thread, each read one committed snapshot
(WAL: readers never block the writer, nor the writer them); tests, point sets, wire bodies,
the change feed and the stats. `peek_stats` reads them beside a running writer.
"""

from __future__ import annotations

import contextlib
import sqlite3
import threading
from collections.abc import Iterable, Iterator
from pathlib import Path
from typing import Any

from taprig.schema.records import WirePointSetSummary

from ..errors import NotFound, StoreError
from ..records import PointSet
from .entries import Change, StoreStats, TestPlan
from .rows import _HIT_FIELDS, _SUMMARY_COLUMNS, _point_set, _test_plan
from .tables import FILE_NAME

MMAP_BYTES = 1 << 28  # reader connections map up to 256 MiB of the file


class Reads:
    """The store's reads; `Store` gives it the file, its lock and the per-thread readers."""

    path: Path
    timeout_s: float
    _closed: bool
    _lock: threading.Lock
    _local: threading.local
    _readers: list[sqlite3.Connection]

    @contextlib.contextmanager
    def _reading(self) -> Iterator[sqlite3.Connection]:
        """A read-only connection holding one snapshot for the `with` block.

        Each thread keeps its own reader connection (opened on first use, closed by
        `close`), so a read costs no connection set-up.
        """
        if self._closed:
            raise StoreError(f"store {self.path} is closed")
        conn = self._reader()
        try:
            conn.execute("BEGIN")
            yield conn
            conn.execute("COMMIT")
        except sqlite3.Error as exc:
            raise StoreError(f"reading {self.path} failed: {exc}") from exc
        finally:
            if conn.in_transaction:  # never leave an old snapshot open on a kept connection
                with contextlib.suppress(sqlite3.Error):
                    conn.rollback()

    def _reader(self) -> sqlite3.Connection:
        conn: sqlite3.Connection | None = getattr(self._local, "conn", None)
        if conn is not None:
            return conn
        try:
            conn = sqlite3.connect(
                self.path.as_uri() + "?mode=rw",
                uri=True,
                timeout=self.timeout_s,
                isolation_level=None,
                check_same_thread=False,  # used by its own thread only; closed by close()
            )
            conn.row_factory = sqlite3.Row
            conn.execute("PRAGMA query_only = ON")
            conn.execute(f"PRAGMA mmap_size = {MMAP_BYTES}")  # BLOBs read without a copy
        except sqlite3.Error as exc:
            raise StoreError(f"cannot read {self.path}: {exc}") from exc
        with self._lock:
            self._readers.append(conn)
        self._local.conn = conn
        return conn

    def _query(self, sql: str, args: Iterable[Any] = ()) -> list[sqlite3.Row]:
        with self._reading() as conn:
            return conn.execute(sql, tuple(args)).fetchall()

    def get_test(self, name: str) -> TestPlan:
        """The test named `name`; StoreError if there is none."""
        with self._reading() as conn:
            row = conn.execute("SELECT * FROM tests WHERE name = ?", (name,)).fetchone()
            if row is None:
                raise NotFound(f"no test named {name!r}")
            return _test_plan(conn, row)

    def list_tests(self) -> list[TestPlan]:
        """All tests, oldest first."""
        with self._reading() as conn:
            return [_test_plan(conn, r) for r in conn.execute("SELECT * FROM tests ORDER BY seq")]

    def list_point_sets(
        self, test: str | None = None, since_seq: int = 0, latest_only: bool = False
    ) -> list[WirePointSetSummary]:
        """Point sets with seq > since_seq, in seq order; latest_only: highest version only."""
        sql = (
            f"SELECT {_SUMMARY_COLUMNS} FROM point_sets p JOIN tests t ON t.id = p.test_id "
            "WHERE p.seq > ? AND (? IS NULL OR t.name = ?)"
        )
        if latest_only:
            sql += (
                " AND p.version = (SELECT MAX(version) FROM point_sets q "
                "WHERE q.test_id = p.test_id AND q.point = p.point)"
            )
        rows = self._query(sql + " ORDER BY p.seq", (since_seq, test, test))
        return [WirePointSetSummary(**dict(r)) for r in rows]

    def get_point_set(self, point_set_id: int, with_hits: bool = False) -> PointSet:
        """The stored point set; its hits carry data=None unless with_hits."""
        with self._reading() as conn:
            return _fetch_point_set(conn, point_set_id, with_hits)

    def get_wire_body(self, point_set_id: int, *schemas: int) -> tuple[str, bytes] | None:
        """(digest, body) written at commit for one of the wire schemas `schemas`, or None.

        A body stays as its commit wrote it, also after the schema moved on: a rig serves the
        bytes every mirror of it already holds, and clients read every older schema.
        """
        marks = ", ".join("?" * len(schemas))
        with self._reading() as conn:
            row = conn.execute(
                f"SELECT digest FROM wire_bodies WHERE point_set_id = ? AND schema IN ({marks})",
                (point_set_id, *schemas),
            ).fetchone()
            if row is None:
                return None
            # Incremental BLOB I/O: one copy of the megabytes, far quicker than a SELECT of it.
            with conn.blobopen("wire_bodies", "body", point_set_id, readonly=True) as blob:
                return str(row["digest"]), blob.read()

    def changes(self, since_seq: int = 0, limit: int = 1000) -> list[Change]:
        """The change feed after `since_seq`, oldest first, at most `limit` entries."""
        rows = self._query(
            "SELECT * FROM changes WHERE seq > ? ORDER BY seq LIMIT ?", (since_seq, limit)
        )
        return [Change(**dict(r)) for r in rows]

    def last_seq(self) -> int:
        """The change seq of the newest commit (0 for an empty store)."""
        return int(self._query("SELECT value FROM store_meta WHERE key = 'last_seq'")[0][0])

    def stats(self) -> StoreStats:
        """File sizes (bytes) and row counts."""
        with self._reading() as conn:
            return _stats(conn, self.path)

    def integrity_check(self) -> str:
        """ "ok", or SQLite's list of problems one per line (PRAGMA integrity_check)."""
        return "\n".join(r[0] for r in self._query("PRAGMA integrity_check"))


def _fetch_point_set(conn: sqlite3.Connection, point_set_id: int, with_hits: bool) -> PointSet:
    """One point set read on `conn`; its hits carry data=None (and scale=None) unless
    with_hits."""
    data = "data, scale" if with_hits else "NULL AS data, NULL AS scale"
    cur = conn.cursor()
    cur.row_factory = sqlite3.Row
    row = cur.execute(
        "SELECT p.*, t.name AS test FROM point_sets p JOIN tests t "
        "ON t.id = p.test_id WHERE p.id = ?",
        (point_set_id,),
    ).fetchone()
    if row is None:
        raise NotFound(f"no point set with id {point_set_id}")
    hits = cur.execute(
        f"SELECT {_HIT_FIELDS}, {data} FROM hits WHERE point_set_id = ? ORDER BY ordinal",
        (point_set_id,),
    ).fetchall()
    return _point_set(row, hits)


def peek_stats(data_dir: Path) -> StoreStats | None:
    """The stats of the store in `data_dir`, opened read-only beside a running writer (for
    `taprigd status`); None if there is no store yet. Raises StoreError if it cannot be read."""
    path = Path(data_dir).resolve() / FILE_NAME
    if not path.exists():
        return None
    try:
        conn = sqlite3.connect(f"{path.as_uri()}?mode=ro", uri=True, timeout=5.0)
    except sqlite3.Error as exc:
        raise StoreError(f"cannot open {path} to read: {exc}") from exc
    try:
        return _stats(conn, path)
    except sqlite3.Error as exc:
        raise StoreError(f"cannot read {path}: {exc}") from exc
    finally:
        conn.close()


def _stats(conn: sqlite3.Connection, path: Path) -> StoreStats:
    def count(table: str) -> int:
        return int(conn.execute(f"SELECT COUNT(*) FROM {table}").fetchone()[0])

    tests, point_sets, hits = (count(t) for t in ("tests", "point_sets", "hits"))
    seq = conn.execute("SELECT value FROM store_meta WHERE key = 'last_seq'").fetchone()
    version = conn.execute("PRAGMA user_version").fetchone()[0]
    wal = path.with_name(FILE_NAME + "-wal")
    wal_bytes = wal.stat().st_size if wal.exists() else 0
    return StoreStats(str(path), path.stat().st_size, wal_bytes, tests, point_sets, hits,
                      int(seq[0]), int(version))  # fmt: skip
