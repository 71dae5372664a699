"""The SQLite file's tables and their migrations: what `<data_dir>/taprig.sqlite3` holds.

The schema version is `PRAGMA user_version`; `MIGRATIONS[i]` brings a database from version
i to i + 1 inside one transaction. `prepare` opens a file in WAL mode and migrates it.
"""

from __future__ import annotations

import contextlib
import sqlite3
from collections.abc import Callable, Iterator, Sequence
from pathlib import Path

from ..errors import StoreError

Migration = Callable[[sqlite3.Connection], None]

FILE_NAME = "taprig.sqlite3"
PAGE_SIZE = 65536  # bytes, the largest SQLite allows

_SCHEMA_1 = (
    "CREATE TABLE store_meta (key TEXT PRIMARY KEY, value INTEGER NOT NULL)",
    "INSERT INTO store_meta (key, value) VALUES ('last_seq', 0)",
    """CREATE TABLE tests (
        id INTEGER PRIMARY KEY,
        name TEXT NOT NULL UNIQUE CHECK (name <> ''),
        created_utc TEXT NOT NULL,
        roving_mode TEXT NOT NULL CHECK (roving_mode IN ('hammer', 'sensor')),
        reference TEXT NOT NULL,
        averages INTEGER NOT NULL CHECK (averages >= 1),
        meta TEXT NOT NULL,
        seq INTEGER NOT NULL UNIQUE)""",
    """CREATE TABLE points (
        test_id INTEGER NOT NULL REFERENCES tests (id) ON DELETE CASCADE,
        ordinal INTEGER NOT NULL,
        label TEXT NOT NULL CHECK (label <> ''),
        x REAL NOT NULL, y REAL NOT NULL, z REAL NOT NULL,
        direction TEXT NOT NULL,
        PRIMARY KEY (test_id, ordinal),
        UNIQUE (test_id, label))""",
    # The array BLOBs come last: SQLite then never reads their overflow pages for a
    # query that does not ask for them (listings, summaries).
    """CREATE TABLE point_sets (
        id INTEGER PRIMARY KEY,
        test_id INTEGER NOT NULL,
        point TEXT NOT NULL,
        version INTEGER NOT NULL CHECK (version >= 1),
        seq INTEGER NOT NULL UNIQUE,
        completed_utc TEXT NOT NULL,
        n_averages INTEGER NOT NULL,
        roving_mode TEXT NOT NULL CHECK (roving_mode IN ('hammer', 'sensor')),
        drive_point TEXT NOT NULL,
        response_labels TEXT NOT NULL,
        response_points TEXT NOT NULL,
        meta TEXT NOT NULL,
        freq BLOB NOT NULL, h1 BLOB NOT NULL, h2 BLOB NOT NULL, coherence BLOB NOT NULL,
        gff BLOB NOT NULL, gxx BLOB NOT NULL, gfx BLOB NOT NULL,
        UNIQUE (test_id, point, version),
        FOREIGN KEY (test_id, point) REFERENCES points (test_id, label) ON DELETE CASCADE)""",
    # SQLite stores a NaN as NULL, so the hit measures may be NULL; they read back as NaN.
    """CREATE TABLE hits (
        point_set_id INTEGER NOT NULL REFERENCES point_sets (id) ON DELETE CASCADE,
        ordinal INTEGER NOT NULL,
        trigger_index INTEGER NOT NULL,
        utc TEXT NOT NULL,
        accepted INTEGER NOT NULL CHECK (accepted IN (0, 1)),
        peak_force_n REAL,
        pulse_width_s REAL,
        findings TEXT NOT NULL,
        data BLOB,
        PRIMARY KEY (point_set_id, ordinal))""",
    """CREATE VIEW changes AS
        SELECT seq, 'test' AS kind, name AS test, NULL AS point_set_id FROM tests
        UNION ALL
        SELECT p.seq, 'point_set', t.name, p.id
        FROM point_sets p JOIN tests t ON t.id = p.test_id""",
)


def _run_statements(statements: Sequence[str]) -> Migration:
    # Statement by statement: executescript() would COMMIT first and break the transaction.
    def migrate(conn: sqlite3.Connection) -> None:
        for sql in statements:
            conn.execute(sql)

    return migrate


# Version 2: each point set's wire body (msgpack, without raw hits) written once, at commit,
# so that any number of workstations pull it without the rig encoding it again. It costs
# disk (about the size of the arrays again) for pulls at close to the network's speed.
_SCHEMA_2 = (
    """CREATE TABLE wire_bodies (
        point_set_id INTEGER PRIMARY KEY REFERENCES point_sets(id) ON DELETE CASCADE,
        schema INTEGER NOT NULL,
        digest TEXT NOT NULL,
        body BLOB NOT NULL
    )""",
)

# Version 3: a hit's record as the device's integer codes (the data BLOB's header names its
# dtype: <i2, <i4, or <f4 for a device without codes) with its scale, SI units per code of
# each channel (a <f8 BLOB). Rows written before keep float32 SI data and a NULL scale,
# which reads as 1.0: nothing of theirs is rewritten.
_SCHEMA_3 = ("ALTER TABLE hits ADD COLUMN scale BLOB",)

MIGRATIONS: list[Migration] = [
    _run_statements(_SCHEMA_1),
    _run_statements(_SCHEMA_2),
    _run_statements(_SCHEMA_3),
]


def prepare(conn: sqlite3.Connection, path: Path) -> None:
    """Bring the file on `conn` to today's schema (WAL, synchronous=FULL, foreign keys on);
    StoreError for a newer schema or a file that is not SQLite."""
    version = _user_version(conn, path)
    if version > len(MIGRATIONS):
        raise StoreError(
            f"{path} has schema version {version}, newer than the "
            f"version {len(MIGRATIONS)} this taprigd knows; upgrade taprigd"
        )
    if version == 0:
        # Large pages before the first table: a point set's arrays are megabytes, and
        # reading a BLOB walks one overflow page per page_size bytes.
        conn.execute(f"PRAGMA page_size = {PAGE_SIZE}")
    mode = conn.execute("PRAGMA journal_mode = WAL").fetchone()[0]
    if mode != "wal":
        raise StoreError(f"{path}: cannot switch to WAL journal (got {mode!r})")
    conn.execute("PRAGMA synchronous = FULL")
    conn.execute("PRAGMA foreign_keys = ON")
    for target in range(version + 1, len(MIGRATIONS) + 1):
        with transaction(conn):
            MIGRATIONS[target - 1](conn)
            conn.execute(f"PRAGMA user_version = {target}")


def _user_version(conn: sqlite3.Connection, path: Path) -> int:
    try:
        return int(conn.execute("PRAGMA user_version").fetchone()[0])
    except sqlite3.DatabaseError as exc:
        raise StoreError(f"{path} is not an SQLite database ({exc})") from exc


@contextlib.contextmanager
def transaction(conn: sqlite3.Connection) -> Iterator[None]:
    """One write transaction (BEGIN IMMEDIATE … COMMIT), rolled back on any exception."""
    conn.execute("BEGIN IMMEDIATE")
    try:
        yield
        conn.execute("COMMIT")
    except BaseException:
        if conn.in_transaction:  # SQLite may already have rolled back (e.g. SQLITE_FULL)
            conn.execute("ROLLBACK")
        raise
