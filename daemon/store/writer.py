"""The store's writer: one thread owns the only write connection and takes jobs from a
queue; every commit is one transaction, so a point set is stored whole or not at all, also
across power loss or kill -9. Saving tests and committing point sets, numbered here.
"""

from __future__ import annotations

import dataclasses
import math
import queue
import sqlite3
import threading
from collections.abc import Callable, Mapping, Sequence
from concurrent.futures import Future
from pathlib import Path
from typing import Any, TypeVar

from taprig.schema.pointset import utc_now

from ..errors import AlreadyExists, DiskFullError, StoreError
from ..private import private_dir, private_file, tighten
from ..records import GridPoint, PointSet, RovingMode
from .entries import BodyEncoder
from .reads import Reads
from .rows import (
    _HIT_COLUMNS,
    _PS_COLUMNS,
    _check_shapes,
    _hit_rows,
    _insert_sql,
    _point_set_row,
    _to_json,
)
from .tables import FILE_NAME, prepare, transaction

T = TypeVar("T")
Job = Callable[[sqlite3.Connection], Any]

DEFAULT_TIMEOUT_S = 30.0


def _is_full(exc: Exception) -> bool:
    # Errors raised by SQLite carry the code; ones built in Python (tests) carry none.
    code = getattr(exc, "sqlite_errorcode", None)
    return (
        isinstance(exc, sqlite3.Error) and code is not None and code & 0xFF == sqlite3.SQLITE_FULL
    )


class Store(Reads):
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
            prepare(conn, self.path)
        except Exception as exc:
            if conn is not None:
                conn.close()
            if isinstance(exc, StoreError):
                raise
            raise StoreError(f"cannot open {self.path} as a taprig store: {exc}") from exc
        return conn

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
                    with transaction(self._conn):
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

        own_transaction: the job opens and ends its transaction itself (`tables.transaction`), so
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
        with transaction(conn):
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
