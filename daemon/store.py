"""The durable store of tests and completed point sets: one SQLite file per data directory.

`<data_dir>/taprig.sqlite3`, WAL journal, synchronous=FULL, foreign keys on. One writer
thread owns the only write connection and takes jobs from a queue; every commit is one
transaction, so a point set is stored whole or not at all, also across power loss or kill -9.
Reads open their own connection per call and see a committed snapshot (WAL: readers never
block the writer, nor the writer them).

Change sequence: every committed test and every committed point set takes the next number of
one store-wide sequence (`store_meta.last_seq`, bumped in the same transaction), so a client
that asks for `changes(since_seq)` learns of new tests and of new point sets in commit order.
Numbers are never reused, not even after rows are deleted.

Arrays are BLOBs: a header `<4s dtype (e.g. b"<c16", NUL-padded)><u1 ndim><ndim × u8 shape>`
followed by the raw little-endian C-order bytes. The schema version is `PRAGMA user_version`;
`MIGRATIONS[i]` brings a database from version i to i + 1 inside one transaction.
"""

from __future__ import annotations

import contextlib
import dataclasses
import json
import math
import queue
import sqlite3
import struct
import threading
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from concurrent.futures import Future
from dataclasses import dataclass
from pathlib import Path
from typing import Any, ClassVar, TypeVar

import numpy as np

from taprig.schema.pointset import (
    ARRAY_DTYPES,
    ARRAYS,
    HIT_DATA,
    HIT_SCALARS,
    SCALARS,
    check_shapes,
    in_dtype,
    utc_now,
)
from taprig.schema.records import WirePointSetSummary

from .errors import AlreadyExists, DiskFullError, NotFound, StoreError
from .private import private_dir, private_file, tighten
from .records import Finding, GridPoint, PointSet, RovingMode, StoredHit

T = TypeVar("T")
Job = Callable[[sqlite3.Connection], Any]
Migration = Callable[[sqlite3.Connection], None]

FILE_NAME = "taprig.sqlite3"
DEFAULT_TIMEOUT_S = 30.0

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

MIGRATIONS: list[Migration] = [_run_statements(_SCHEMA_1), _run_statements(_SCHEMA_2)]

BodyEncoder = Callable[[int, "PointSet"], tuple[int, str, bytes]]
"""(point set id, the point set as stored, hits without data) -> (schema, digest, body)."""


@dataclass(frozen=True, slots=True)
class TestPlan:
    """A stored test: its grid in measuring order, roving mode, reference point, averages."""

    __test__: ClassVar[bool] = False  # not a pytest test class despite the name

    name: str
    grid: tuple[GridPoint, ...]
    roving_mode: RovingMode
    reference: str
    averages: int
    meta: dict[str, Any]
    created_utc: str
    seq: int


@dataclass(frozen=True, slots=True)
class Change:
    """One entry of the change feed: a new test (point_set_id None) or a new point set."""

    seq: int
    kind: str  # "test" | "point_set"
    test: str
    point_set_id: int | None


@dataclass(frozen=True, slots=True)
class StoreStats:
    """Size and contents of the store; file sizes in bytes (the WAL counted apart)."""

    path: str
    db_bytes: int
    wal_bytes: int
    tests: int
    point_sets: int
    hits: int
    last_seq: int
    schema_version: int


# ---------------------------------------------------------------- arrays as BLOBs

_HEAD = struct.Struct("<4sB")


PAGE_SIZE = 65536  # bytes, the largest SQLite allows
MMAP_BYTES = 1 << 28  # reader connections map up to 256 MiB of the file


def encode_array(a: Any, dtype: np.dtype[Any], ndim: int, what: str) -> bytes:
    """Header + raw little-endian bytes of `a` cast to `dtype`; StoreError if it does not fit."""
    arr = np.asarray(a)
    if arr.ndim != ndim or not np.can_cast(arr.dtype, dtype, casting="same_kind"):
        raise StoreError(f"{what}: expected {ndim}-d {dtype.name}, got {arr.ndim}-d {arr.dtype}")
    head = _HEAD.pack(dtype.str.encode(), ndim) + struct.pack(f"<{ndim}Q", *arr.shape)
    return head + np.ascontiguousarray(arr, dtype=dtype).tobytes()


def decode_array(blob: bytes) -> np.ndarray:
    """The (read-only) array of an `encode_array` BLOB."""
    try:
        code, ndim = _HEAD.unpack_from(blob)
        dtype = np.dtype(code.rstrip(b"\0").decode())
        shape = struct.unpack_from(f"<{ndim}Q", blob, _HEAD.size)
    except (struct.error, TypeError, ValueError) as exc:
        raise StoreError(f"corrupt array BLOB header ({len(blob)} bytes): {exc}") from exc
    offset = _HEAD.size + 8 * ndim
    if dtype.str not in ARRAY_DTYPES or len(blob) - offset != dtype.itemsize * math.prod(shape):
        raise StoreError(f"corrupt array BLOB ({dtype}, shape {shape}, {len(blob)} bytes)")
    return np.frombuffer(blob, dtype, offset=offset).reshape(shape)


def _check_shapes(ps: PointSet) -> None:
    """StoreError when the arrays of `ps` do not agree (`schema.pointset.check_shapes`)."""
    shapes = {a.name: np.shape(getattr(ps, a.name)) for a in ARRAYS}
    problem = check_shapes(len(ps.response_labels), len(ps.response_points), shapes)
    if problem is not None:
        raise StoreError(f"point set {ps.point!r}: {problem[0]}: {problem[1]}")


# ---------------------------------------------------------------- the store


def _to_json(value: Any, what: str) -> str:
    try:
        return json.dumps(value, allow_nan=False, sort_keys=True)
    except (TypeError, ValueError) as exc:
        raise StoreError(f"{what} is not plain JSON: {exc}") from exc


def _fetch_point_set(conn: sqlite3.Connection, point_set_id: int, with_hits: bool) -> PointSet:
    """One point set read on `conn`; its hits carry data=None unless with_hits."""
    data = "data" if with_hits else "NULL AS data"
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


def _is_full(exc: Exception) -> bool:
    # Errors raised by SQLite carry the code; ones built in Python (tests) carry none.
    code = getattr(exc, "sqlite_errorcode", None)
    return (
        isinstance(exc, sqlite3.Error) and code is not None and code & 0xFF == sqlite3.SQLITE_FULL
    )


class Store:
    """The SQLite store of one data directory. Thread-safe; `close()` when done.

    max_pages: test hook only — caps the write connection's `PRAGMA max_page_count` so a
    test can provoke "database or disk is full" without a full disk (see `set_max_pages`).
    """

    def __init__(
        self,
        data_dir: str | Path,
        *,
        max_pages: int | None = None,
        timeout_s: float = DEFAULT_TIMEOUT_S,
        body_encoder: BodyEncoder | None = None,
    ) -> None:
        self.path = private_dir(data_dir).resolve() / FILE_NAME
        self._private_files()
        self.timeout_s = timeout_s
        self._body_encoder = body_encoder
        self._conn = self._open_writer()
        self._jobs: queue.SimpleQueue[tuple[Job, Future[Any], bool] | None] = queue.SimpleQueue()
        self._lock = threading.Lock()
        self._local = threading.local()
        self._readers: list[sqlite3.Connection] = []
        self._closed = False
        if max_pages is not None:
            self._conn.execute(f"PRAGMA max_page_count = {int(max_pages)}")
        self._thread = threading.Thread(target=self._run, name="store-writer", daemon=True)
        self._thread.start()

    # -- opening and migrating

    def _private_files(self) -> None:
        # 0600 whatever the umask: SQLite makes -wal and -shm with the database file's mode.
        try:
            private_file(self.path)
            for suffix in ("-wal", "-shm", "-journal"):
                tighten(f"{self.path}{suffix}")
        except OSError as exc:
            raise StoreError(f"cannot make {self.path} private: {exc}") from exc

    def _open_writer(self) -> sqlite3.Connection:
        # Opened here, then used by the writer thread alone (its start orders the hand-over).
        conn = None
        try:
            conn = sqlite3.connect(
                self.path, timeout=self.timeout_s, isolation_level=None, check_same_thread=False
            )
            self._prepare(conn)
        except Exception as exc:
            if conn is not None:
                conn.close()
            if isinstance(exc, StoreError):
                raise
            raise StoreError(f"cannot open {self.path} as a taprig store: {exc}") from exc
        return conn

    def _prepare(self, conn: sqlite3.Connection) -> None:
        version = self._user_version(conn)
        if version > len(MIGRATIONS):
            raise StoreError(
                f"{self.path} has schema version {version}, newer than the "
                f"version {len(MIGRATIONS)} this taprigd knows; upgrade taprigd"
            )
        if version == 0:
            # Large pages before the first table: a point set's arrays are megabytes, and
            # reading a BLOB walks one overflow page per page_size bytes.
            conn.execute(f"PRAGMA page_size = {PAGE_SIZE}")
        mode = conn.execute("PRAGMA journal_mode = WAL").fetchone()[0]
        if mode != "wal":
            raise StoreError(f"{self.path}: cannot switch to WAL journal (got {mode!r})")
        conn.execute("PRAGMA synchronous = FULL")
        conn.execute("PRAGMA foreign_keys = ON")
        for target in range(version + 1, len(MIGRATIONS) + 1):
            with self._transaction(conn):
                MIGRATIONS[target - 1](conn)
                conn.execute(f"PRAGMA user_version = {target}")

    def _user_version(self, conn: sqlite3.Connection) -> int:
        try:
            return int(conn.execute("PRAGMA user_version").fetchone()[0])
        except sqlite3.DatabaseError as exc:
            raise StoreError(f"{self.path} is not an SQLite database ({exc})") from exc

    @staticmethod
    @contextlib.contextmanager
    def _transaction(conn: sqlite3.Connection) -> Iterator[None]:
        conn.execute("BEGIN IMMEDIATE")
        try:
            yield
            conn.execute("COMMIT")
        except BaseException:
            if conn.in_transaction:  # SQLite may already have rolled back (e.g. SQLITE_FULL)
                conn.execute("ROLLBACK")
            raise

    # -- the writer thread

    def _run(self) -> None:
        while (item := self._jobs.get()) is not None:
            job, future, own = item
            if not future.set_running_or_notify_cancel():
                continue
            try:
                if own:  # the job opens its own transaction (work to do before it)
                    result = job(self._conn)
                else:
                    with self._transaction(self._conn):
                        result = job(self._conn)
            except Exception as exc:
                future.set_exception(self._as_store_error(exc))
            else:
                future.set_result(result)
        self._conn.close()

    def _as_store_error(self, exc: Exception) -> StoreError:
        if _is_full(exc):
            new: StoreError = DiskFullError(
                f"no room left for {self.path} (database or disk is full): nothing of this "
                "commit was kept; free space on the data disk and try again"
            )
        elif isinstance(exc, StoreError):
            return exc
        else:
            new = StoreError(
                f"commit to {self.path} failed and was rolled back: {type(exc).__name__}: {exc}"
            )
        new.__cause__ = exc
        return new

    def submit(
        self, job: Callable[[sqlite3.Connection], T], own_transaction: bool = False
    ) -> Future[T]:
        """Queue `job(write_connection)` to run in its own transaction on the writer thread.

        own_transaction: the job opens and ends its transaction itself (`_transaction`), so
        that it can do slow work first without holding the write lock.
        """
        future: Future[T] = Future()
        with self._lock:
            if self._closed:
                raise StoreError(f"store {self.path} is closed")
            self._jobs.put((job, future, own_transaction))
        return future

    def _call(self, job: Callable[[sqlite3.Connection], T]) -> T:
        return self._wait(self.submit(job))

    def _wait(self, future: Future[T]) -> T:
        try:
            return future.result(self.timeout_s)
        except TimeoutError:
            raise StoreError(
                f"store writer did not answer within {self.timeout_s} s; "
                "the commit may still complete"
            ) from None

    def close(self) -> None:
        """Finish queued jobs, stop the writer thread, close the file. Idempotent."""
        with self._lock:
            if not self._closed:
                self._closed = True
                self._jobs.put(None)
        self._thread.join()
        with self._lock:
            readers, self._readers = self._readers, []
        for conn in readers:
            conn.close()

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def set_max_pages(self, pages: int) -> None:
        """Test hook: set the write connection's `PRAGMA max_page_count` (PAGE_SIZE pages)."""
        self._call(lambda c: c.execute(f"PRAGMA max_page_count = {int(pages)}"))

    # -- writing

    def save_test(
        self,
        name: str,
        grid: Sequence[GridPoint],
        roving_mode: RovingMode | str,
        reference: str,
        averages: int,
        meta: Mapping[str, Any] | None = None,
    ) -> None:
        """Store a new test with its grid (in measuring order); takes the next change seq.

        A test is never replaced (its point sets refer to its grid): a name in use is an error.
        """
        mode, labels = RovingMode(roving_mode), [p.label for p in grid]
        # Roving hammer: the reference is where the first sensor sits, on the grid or off it
        # ("x,y,z"), or "" while unknown; roving sensor: the hammer's grid point.
        on_grid = reference in labels or mode is RovingMode.HAMMER
        if not name or not grid or len(set(labels)) != len(labels) or not on_grid:
            raise StoreError(
                f"test {name!r}: needs a name, a grid of distinct labels and a "
                f"reference in it (reference {reference!r}, {len(grid)} points)"
            )
        if not all(math.isfinite(c) for p in grid for c in (p.x, p.y, p.z)):
            raise StoreError(f"test {name!r}: grid coordinates must be finite")
        meta_json = _to_json(dict(meta or {}), f"meta of test {name!r}")
        self._call(lambda c: self._insert_test(c, name, grid, mode, reference, averages, meta_json))

    def _insert_test(
        self,
        conn: sqlite3.Connection,
        name: str,
        grid: Sequence[GridPoint],
        mode: RovingMode,
        reference: str,
        averages: int,
        meta_json: str,
    ) -> None:
        if conn.execute("SELECT 1 FROM tests WHERE name = ?", (name,)).fetchone():
            raise AlreadyExists(f"a test named {name!r} already exists")
        cur = conn.execute(
            "INSERT INTO tests (name, created_utc, roving_mode, reference, averages, meta, seq)"
            " VALUES (?, ?, ?, ?, ?, ?, ?)",
            (name, utc_now(), mode.value, reference, int(averages), meta_json, _next_seq(conn)),
        )
        conn.executemany(
            "INSERT INTO points VALUES (?, ?, ?, ?, ?, ?, ?)",
            ((cur.lastrowid, i, p.label, p.x, p.y, p.z, p.direction) for i, p in enumerate(grid)),
        )

    def submit_point_set(self, ps: PointSet) -> Future[PointSet]:
        """Queue a commit of `ps`; the future gives it back with version, seq, completed_utc."""
        _check_shapes(ps)
        return self.submit(lambda conn: self._commit_point_set(conn, ps), own_transaction=True)

    def commit_point_set(self, ps: PointSet) -> PointSet:
        """Commit `ps` and all its hits in one transaction (blocking, `timeout_s` at most).

        Returns it with `version` (1 + the highest stored version of that test and point) and
        `seq`. Raises DiskFullError when there is no room, StoreError on anything else;
        either way nothing of `ps` is kept.
        """
        return self._wait(self.submit_point_set(ps))

    def _commit_point_set(self, conn: sqlite3.Connection, ps: PointSet) -> PointSet:
        """On the writer thread: number `ps`, encode its wire body, then one short transaction.

        The body (megabytes to cast, pack and hash) is made before the transaction, so the
        write lock is held only to copy bytes in. Sound because this thread is the store's
        only writer: the id, version and seq read here cannot change before it writes them,
        and the transaction checks that they did not.
        """
        test_id, pid, done = self._numbered(conn, ps)
        body = None if self._body_encoder is None else self._body_encoder(pid, done)
        with self._transaction(conn):
            _, pid_now, now = self._numbered(conn, ps)
            if (pid_now, now.version, now.seq) != (pid, done.version, done.seq):
                raise StoreError(f"point set {ps.point!r}: the store changed under its writer")
            _next_seq(conn)
            row = _point_set_row(test_id, done)
            conn.execute(_insert_sql("point_sets", ("id", *_PS_COLUMNS)), (pid, *row))
            conn.executemany(_insert_sql("hits", _HIT_COLUMNS), _hit_rows(pid, done.hits))
            if body is not None:
                conn.execute("INSERT INTO wire_bodies VALUES (?, ?, ?, ?)", (pid, *body))
        return done

    @staticmethod
    def _numbered(conn: sqlite3.Connection, ps: PointSet) -> tuple[int, int, PointSet]:
        """(its test's id, the id `ps` gets, `ps` with the version, seq and completed_utc it
        gets); StoreError if its test or point is not stored."""
        test_id = _test_id(conn, ps.test, ps.point)
        pid = 1 + int(conn.execute("SELECT COALESCE(MAX(id), 0) FROM point_sets").fetchone()[0])
        seq = 1 + int(
            conn.execute("SELECT value FROM store_meta WHERE key = 'last_seq'").fetchone()[0]
        )
        version = _next_version(conn, test_id, ps.point)
        done = dataclasses.replace(
            ps, version=version, seq=seq, completed_utc=ps.completed_utc or utc_now()
        )
        return test_id, pid, done

    # -- reading

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


# ---------------------------------------------------------------- rows ↔ records


_HIT_FIELDS = ", ".join((*HIT_SCALARS, "findings"))


def _next_seq(conn: sqlite3.Connection) -> int:
    conn.execute("UPDATE store_meta SET value = value + 1 WHERE key = 'last_seq'")
    return int(conn.execute("SELECT value FROM store_meta WHERE key = 'last_seq'").fetchone()[0])


def _test_id(conn: sqlite3.Connection, name: str, point: str) -> int:
    """The id of test `name`, which must exist and have `point` in its grid."""
    row = conn.execute("SELECT id FROM tests WHERE name = ?", (name,)).fetchone()
    if row is None:
        raise StoreError(f"no test named {name!r}; save the test before its point sets")
    sql = "SELECT 1 FROM points WHERE test_id = ? AND label = ?"
    if conn.execute(sql, (row[0], point)).fetchone() is None:
        raise StoreError(f"point {point!r} is not in the grid of test {name!r}")
    return int(row[0])


def _next_version(conn: sqlite3.Connection, test_id: int, point: str) -> int:
    sql = "SELECT COALESCE(MAX(version), 0) FROM point_sets WHERE test_id = ? AND point = ?"
    return 1 + int(conn.execute(sql, (test_id, point)).fetchone()[0])


# Named columns, so that a later migration may add columns to these tables. A point set's
# scalars keep their names (its test is test_id), each array has the column of its ArraySpec.
_PS_COLUMNS = (
    "test_id",
    *(name for name in SCALARS if name != "test"),
    "meta",
    *(a.column for a in ARRAYS),
)
_HIT_COLUMNS = ("point_set_id", "ordinal", *HIT_SCALARS, "findings", HIT_DATA.column)
_SUMMARY_COLUMNS = ", ".join(
    "t.name AS test" if f.name == "test" else f"p.{f.name}"
    for f in dataclasses.fields(WirePointSetSummary)
)


def _insert_sql(table: str, columns: Sequence[str]) -> str:
    marks = ", ".join("?" * len(columns))
    return f"INSERT INTO {table} ({', '.join(columns)}) VALUES ({marks})"


def _point_set_row(test_id: int, ps: PointSet) -> tuple[Any, ...]:
    """The values of `_PS_COLUMNS` for `ps`."""
    values = {name: getattr(ps, name) for name in SCALARS}
    values["test_id"] = test_id
    values["n_averages"] = int(ps.n_averages)
    values["roving_mode"] = RovingMode(ps.roving_mode).value
    values["response_labels"] = _to_json(list(ps.response_labels), "response labels")
    values["response_points"] = _to_json(list(ps.response_points), "response points")
    values["meta"] = _to_json(ps.meta, f"meta of point set {ps.point!r}")
    for a in ARRAYS:
        values[a.column] = encode_array(
            getattr(ps, a.name), a.dtype, a.ndim, f"point set {ps.point!r}: {a.name}"
        )
    return tuple(values[column] for column in _PS_COLUMNS)


def _hit_rows(point_set_id: int, hits: Iterable[StoredHit]) -> Iterator[tuple[Any, ...]]:
    """The values of `_HIT_COLUMNS` for each hit."""
    # A generator: each hit is encoded as it is inserted, so a bad hit fails mid-transaction.
    d = HIT_DATA
    for i, h in enumerate(hits):
        data = None if h.data is None else encode_array(h.data, d.dtype, d.ndim, f"hit {i} data")
        findings = _to_json([[f.code, f.message] for f in h.findings], f"hit {i} findings")
        values = {name: getattr(h, name) for name in HIT_SCALARS}
        values.update(
            point_set_id=point_set_id,
            ordinal=i,
            trigger_index=int(h.trigger_index),
            accepted=int(bool(h.accepted)),
            peak_force_n=float(h.peak_force_n),
            pulse_width_s=float(h.pulse_width_s),
            findings=findings,
            data=data,
        )
        yield tuple(values[column] for column in _HIT_COLUMNS)


def _test_plan(conn: sqlite3.Connection, row: sqlite3.Row) -> TestPlan:
    grid = tuple(
        GridPoint(*p)
        for p in conn.execute(
            "SELECT label, x, y, z, direction FROM points WHERE test_id = ? ORDER BY ordinal",
            (row["id"],),
        )
    )
    return TestPlan(
        row["name"],
        grid,
        RovingMode(row["roving_mode"]),
        row["reference"],
        row["averages"],
        json.loads(row["meta"]),
        row["created_utc"],
        row["seq"],
    )


def _point_set(row: sqlite3.Row, hits: Sequence[sqlite3.Row]) -> PointSet:
    """The `PointSet` of a point_sets row (with its test's name as ``test``) and its hits."""
    values = {name: row[name] for name in SCALARS}
    values["roving_mode"] = RovingMode(row["roving_mode"])
    values["response_labels"] = tuple(json.loads(row["response_labels"]))
    values["response_points"] = tuple(json.loads(row["response_points"]))
    # Rows of schema 1 hold float64 spectra: read in today's dtypes (schema.pointset).
    arrays: dict[str, Any] = {
        a.name: in_dtype(decode_array(row[a.column]), a.dtype) for a in ARRAYS
    }
    stored = tuple(_stored_hit(h) for h in hits)
    return PointSet(**values, **arrays, hits=stored, meta=json.loads(row["meta"]))


def _stored_hit(h: sqlite3.Row) -> StoredHit:
    """The `StoredHit` of a hits row; SQLite's NULL for a NaN measure reads back as NaN."""
    values = {name: h[name] for name in HIT_SCALARS}
    values["accepted"] = bool(h["accepted"])
    for name in ("peak_force_n", "pulse_width_s"):
        values[name] = math.nan if h[name] is None else h[name]
    findings = tuple(Finding(c, m) for c, m in json.loads(h["findings"]))
    data = None if h[HIT_DATA.column] is None else decode_array(h[HIT_DATA.column])
    return StoredHit(**values, findings=findings, data=data)
