"""Writing into the archive: one rig's tests, point sets and cursor, as a follower stores them.

`RigWriter` holds one connection (autocommit; each store is its own transaction) and, while
it follows the rig, the rig's advisory lock on that connection's session. A point set, its
test row if missing and the rig's cursor are committed together, so the archive holds every
change up to the cursor and nothing half-written: a follower killed at any moment, or a
database that goes away, leaves whole point sets only, and the next follower carries on at
the cursor. Keys are unique per rig and point-set id and per rig, test, point and version;
a point set already there with the same digest is skipped, with another digest refused.
"""

from __future__ import annotations

import contextlib
import json
import re
from typing import Final

import psycopg

from taprig.schema import objects, records

from ..mirror import MirroredPointSet
from .db import LOCK_SPACE, ArchiveError, connect, explain, require_schema

_SERIAL: Final = re.compile(r"(?:[-_.:#/ ]+[0-9][0-9TZtz]*)+$")


def part_of(test: records.WireTest) -> str:
    """The part type a test belongs to, for trends of repeated tests of one part.

    The test's ``meta["part"]`` when it is a non-empty string; otherwise its name without its
    trailing numeric words (each after one of - _ . : # / or a space, digits with T or Z
    inside, as in serials, dates and times): ``bracket-A7-2026-12-03`` → ``bracket-A7``,
    ``housing_0017`` → ``housing``. A name that is nothing but one number is its own part.
    """
    given = test.meta.get("part")
    if isinstance(given, str) and given.strip():
        return given.strip()
    stripped = _SERIAL.sub("", test.name)
    return stripped or test.name


# One statement is one transaction: the row goes in (or is found identical) and the cursor
# moves, or neither. CTEs see the table as it was before the statement, so `same` finds only
# a row stored earlier, with the same id, keys and digest.
_PUT_POINT_SET: Final = """
WITH ins AS (
    INSERT INTO point_sets (rig_id, id, test, point, version, seq, completed_utc, n_averages,
                            schema_version, digest, size, body)
    VALUES (%s, %s, %s, %s, %s, %s, %s, %s, %s, %s, %s, %b)
    ON CONFLICT DO NOTHING RETURNING 1
), same AS (
    SELECT 1 FROM point_sets
    WHERE rig_id = %s AND id = %s AND digest = %s AND test = %s AND point = %s AND version = %s
), adv AS (
    UPDATE rigs SET cursor = greatest(cursor, %s)
    WHERE rig_id = %s AND (EXISTS (SELECT 1 FROM ins) OR EXISTS (SELECT 1 FROM same))
    RETURNING 1
)
SELECT EXISTS (SELECT 1 FROM ins), EXISTS (SELECT 1 FROM adv)
"""


class StoreRefused(ArchiveError):
    """The archive holds other bytes under this point set's keys: the rig's store was replaced."""


class RigWriter:
    """Stores one rig's changes. Owned by one thread; `close()` is idempotent."""

    def __init__(self, dsn: str, rig_id: str, follower: str) -> None:
        self.dsn, self.rig_id, self.follower = dsn, rig_id, follower
        self._conn = connect(dsn)
        self._locked = False
        try:
            # Safe without waiting for the WAL flush: a commit the server loses in a crash has
            # its cursor lost with it, so the next follower fetches that point set again from
            # the rig, which still has it. Nothing is acknowledged to anyone on a commit.
            self._conn.execute("SET synchronous_commit = off")
            require_schema(self._conn, dsn)
        except ArchiveError:
            self._conn.close()
            raise

    def close(self) -> None:
        """Release the rig's lock, then close the connection.

        Unlocked explicitly: the server would release it with the session, but only once it
        has noticed that the session ended, so a follower started right after this one could
        still find the lock held and give up its pass.
        """
        if self._locked and not self._conn.closed:
            with contextlib.suppress(psycopg.Error):  # then the session's end releases it
                self._conn.execute(
                    "SELECT pg_advisory_unlock(%s, hashtext(%s))", (LOCK_SPACE, self.rig_id)
                )
        self._conn.close()
        self._locked = False

    def try_lock(self) -> bool:
        """Take the rig's advisory lock for this session; False while another follower has it."""
        row = self._run("SELECT pg_try_advisory_lock(%s, hashtext(%s))", (LOCK_SPACE, self.rig_id))
        self._locked = bool(row and row[0])
        return self._locked

    def bind(self, name: str, url: str) -> int:
        """Record the rig (name and address as now) and return its cursor."""
        row = self._run(
            "INSERT INTO rigs (rig_id, name, url, follower) VALUES (%s, %s, %s, %s) "
            "ON CONFLICT (rig_id) DO UPDATE SET name = excluded.name, url = excluded.url, "
            "follower = excluded.follower RETURNING cursor",
            (self.rig_id, name, url, self.follower),
        )
        return int(str(row[0])) if row else 0

    def note(self, error: str | None) -> None:
        """Record the outcome of a pass over the rig: None for success, else the error."""
        self._run(
            "UPDATE rigs SET last_pull = CASE WHEN %s::text IS NULL THEN now() ELSE last_pull "
            "END, last_error = %s WHERE rig_id = %s",
            (error, error, self.rig_id),
        )

    def put_test(self, test: records.WireTest, seq: int | None) -> None:
        """Store (or update) a test; move the cursor to `seq` in the same transaction."""
        try:
            with self._conn.transaction():
                self._upsert_test(test)
                if seq is not None:
                    self._advance(seq)
        except psycopg.Error as exc:
            raise explain(exc, self.dsn) from None

    def has_test(self, name: str) -> bool:
        row = self._run("SELECT 1 FROM tests WHERE rig_id = %s AND name = %s", (self.rig_id, name))
        return row is not None

    def put_point_set(self, ps: MirroredPointSet, seq: int, test: records.WireTest | None) -> bool:
        """Store one point set and move the cursor to `seq`, in one transaction (one statement,
        one round trip); False if it was already here with the same digest. A test given is
        stored first, in a transaction of its own (storing a test again changes nothing).

        StoreRefused when its id or (test, point, version) is here with other bytes: then
        nothing is stored and the cursor stays.
        """
        s = ps.summary
        if test is not None:
            self.put_test(test, None)
        row = self._run(
            _PUT_POINT_SET,
            (self.rig_id, s.id, s.test, s.point, s.version, s.seq, s.completed_utc, s.n_averages,
             ps.schema, ps.digest, len(ps.body), ps.body,
             self.rig_id, s.id, ps.digest, s.test, s.point, s.version, seq, self.rig_id),
        )  # fmt: skip
        stored, advanced = (bool(row[0]), bool(row[1])) if row else (False, False)
        if not advanced:
            raise StoreRefused(
                f"rig {self.rig_id}: point set {s.id} ({s.test}/{s.point} v{s.version}) differs "
                "from the archived one: the rig's store was replaced; nothing was overwritten"
            )
        return stored

    def _upsert_test(self, test: records.WireTest) -> None:
        body = json.dumps(objects.test_to_obj(test), separators=(",", ":"))
        self._conn.execute(
            "INSERT INTO tests (rig_id, name, part, seq, created_utc, roving_mode, reference, "
            "averages, grid_points, body) VALUES (%s, %s, %s, %s, %s, %s, %s, %s, %s, %s) "
            "ON CONFLICT (rig_id, name) DO UPDATE SET part = excluded.part, seq = excluded.seq, "
            "created_utc = excluded.created_utc, roving_mode = excluded.roving_mode, "
            "reference = excluded.reference, averages = excluded.averages, "
            "grid_points = excluded.grid_points, body = excluded.body",
            (
                self.rig_id,
                test.name,
                part_of(test),
                test.seq,
                test.created_utc,
                test.roving_mode,
                test.reference,
                test.averages,
                len(test.grid),
                body,
            ),
        )

    def _advance(self, seq: int) -> None:
        # Never backwards: a change stored again (after a lost answer) keeps the cursor.
        self._conn.execute(
            "UPDATE rigs SET cursor = greatest(cursor, %s) WHERE rig_id = %s", (seq, self.rig_id)
        )

    def _run(self, query: str, params: tuple[object, ...]) -> tuple[object, ...] | None:
        try:
            cur = self._conn.execute(query, params)
            return cur.fetchone() if cur.description else None
        except psycopg.Error as exc:
            raise explain(exc, self.dsn) from None
