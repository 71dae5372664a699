"""The archive's database: where it is (DSN), connecting, errors in one sentence, migrations.

The DSN comes from the configuration or ``TAPRIG_ARCHIVE_DSN`` (libpq connection string or
URI). Its password never leaves this module in text: `redact` rebuilds the DSN without it
through psycopg's conninfo tools, and every message that names the database uses it.

Migrations are the plain SQL files ``migrations/NNNN_<what>.sql`` shipped with the package,
applied in order of NNNN, each in one transaction together with its row in
``archive_migrations`` (version, name, SHA-256 of the file, when). Concurrent `migrate` calls
serialise on an advisory lock; a database that is newer than this client is refused.
"""

from __future__ import annotations

import hashlib
import importlib.resources
import re
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Final

import psycopg
from psycopg import conninfo, errors

from ..errors import ClientError

DSN_ENV: Final = "TAPRIG_ARCHIVE_DSN"
APPLICATION: Final = "taprig-archive"
CONNECT_TIMEOUT_S: Final = 5
LOCK_SPACE: Final = 0x74617072  # first key of every advisory lock taken by taprig ('tapr')
MIGRATION_LOCK: Final = 0  # second key of the migration lock (rig locks use hashtext(rig id))
_MIGRATION_FILE: Final = re.compile(r"^(\d{4})_([a-z0-9_]+)\.sql$")


class ArchiveError(ClientError):
    """The archive database cannot be reached, read or written, or does not fit this client."""

    exit_code = 4


class ArchiveFull(ArchiveError):
    """PostgreSQL has no room left for what was being stored (nothing of it was kept)."""


def resolve_dsn(configured: str | None, environ: Mapping[str, str]) -> str:
    """The DSN to use: the configured one, else $TAPRIG_ARCHIVE_DSN; ArchiveError if neither
    or if it is not a connection string."""
    dsn = configured or environ.get(DSN_ENV, "")
    if not dsn:
        raise ArchiveError(f"no archive database: give a DSN in the configuration or {DSN_ENV}")
    try:
        conninfo.conninfo_to_dict(dsn)
    except psycopg.ProgrammingError:
        raise ArchiveError(
            f"the archive DSN is not a PostgreSQL connection string ({DSN_ENV} "
            "or the configuration's dsn)"
        ) from None
    return dsn


def redact(dsn: str) -> str:
    """`dsn` as a keyword string without its password (safe for logs and JSON)."""
    try:
        params = conninfo.conninfo_to_dict(dsn)
    except psycopg.ProgrammingError:
        return "<unreadable DSN>"
    params.pop("password", None)
    return conninfo.make_conninfo("", **{k: v for k, v in params.items() if v is not None})


def explain(exc: BaseException, dsn: str) -> ArchiveError:
    """One sentence for a psycopg error, naming the database without its password.

    A full disk becomes ArchiveFull; the server's own message is kept, since it names the
    object (table, role) at fault. Passwords are never in server messages; libpq's connection
    errors may quote the DSN, so they are redacted too.
    """
    where = redact(dsn)
    text = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    params = _params(dsn)
    if params.get("password"):
        text = text.replace(params["password"], "********")
    if isinstance(exc, errors.DiskFull) or "No space left on device" in text:
        return ArchiveFull(
            f"the archive database ({where}) is out of disk space; nothing of the "
            f"point set was kept: {text}"
        )
    if isinstance(exc, errors.InsufficientPrivilege):
        return ArchiveError(f"the archive database ({where}) refused: {text}")
    if isinstance(exc, psycopg.OperationalError):
        return ArchiveError(f"cannot reach the archive database ({where}): {text}")
    return ArchiveError(f"the archive database ({where}) failed: {text}")


def _params(dsn: str) -> dict[str, str]:
    try:
        return {k: str(v) for k, v in conninfo.conninfo_to_dict(dsn).items() if v is not None}
    except psycopg.ProgrammingError:
        return {}


def connect(dsn: str, autocommit: bool = True) -> psycopg.Connection[tuple[object, ...]]:
    """A new connection (application name taprig-archive, 5 s connect timeout)."""
    try:
        return psycopg.connect(
            dsn,
            autocommit=autocommit,
            connect_timeout=CONNECT_TIMEOUT_S,
            application_name=APPLICATION,
        )
    except psycopg.Error as exc:
        raise explain(exc, dsn) from None


# ---------------------------------------------------------------- migrations


@dataclass(frozen=True, slots=True)
class Migration:
    """One SQL file of the package: its number, name, text and the text's SHA-256."""

    version: int
    name: str
    text: str

    @property
    def digest(self) -> str:
        return hashlib.sha256(self.text.encode()).hexdigest()


def migrations() -> list[Migration]:
    """The package's migrations in order of their number."""
    folder = importlib.resources.files(__package__ or __name__).joinpath("migrations")
    found = []
    for entry in folder.iterdir():
        match = _MIGRATION_FILE.match(entry.name)
        if match:
            found.append(Migration(int(match[1]), match[2], entry.read_text(encoding="utf-8")))
    found.sort(key=lambda m: m.version)
    if [m.version for m in found] != list(range(1, len(found) + 1)):
        raise ArchiveError(f"the package's migrations are not numbered 1..n: {found}")
    return found


SCHEMA_VERSION: Final = len(migrations())
"""The schema version this client writes and reads (the number of its last migration)."""

_LEDGER: Final = """
CREATE TABLE IF NOT EXISTS archive_migrations (
    version integer PRIMARY KEY, name text NOT NULL, sha256 text NOT NULL,
    applied_at timestamptz NOT NULL DEFAULT now()
)"""


def applied(conn: psycopg.Connection[tuple[object, ...]]) -> dict[int, str]:
    """version → SHA-256 of every migration recorded in the database (empty: none)."""
    try:
        rows = conn.execute("SELECT version, sha256 FROM archive_migrations").fetchall()
    except errors.UndefinedTable:  # (in autocommit, the failed statement leaves nothing open)
        return {}
    return {int(str(v)): str(d) for v, d in rows}


def migrate(dsn: str) -> list[Migration]:
    """Apply every migration the database lacks, in order; the ones applied now.

    ArchiveError when the database records a migration this client does not have (it is
    newer) or one whose file changed since it was applied.
    """
    conn = connect(dsn)
    try:
        conn.execute("SELECT pg_advisory_lock(%s, %s)", (LOCK_SPACE, MIGRATION_LOCK))
        conn.execute(_LEDGER)
        done = applied(conn)
        ours = {m.version: m for m in migrations()}
        _check_known(done, ours, dsn)
        now = [m for m in ours.values() if m.version not in done]
        for m in now:
            with conn.transaction():
                conn.execute(m.text.encode())  # several statements: sent as one simple query
                conn.execute(
                    "INSERT INTO archive_migrations (version, name, sha256) VALUES (%s, %s, %s)",
                    (m.version, m.name, m.digest),
                )
        return now
    except psycopg.Error as exc:
        raise explain(exc, dsn) from None
    finally:
        conn.close()


def _check_known(done: Mapping[int, str], ours: Mapping[int, Migration], dsn: str) -> None:
    newer = sorted(v for v in done if v not in ours)
    if newer:
        raise ArchiveError(
            f"the archive ({redact(dsn)}) has schema {max(done)}; this client "
            f"knows up to {len(ours)}: upgrade taprig"
        )
    changed = sorted(v for v, d in done.items() if ours[v].digest != d)
    if changed:
        raise ArchiveError(
            f"the archive ({redact(dsn)}) applied migration(s) {changed} from "
            "other files than this client's: it was not made by this taprig"
        )


def require_schema(conn: psycopg.Connection[tuple[object, ...]], dsn: str) -> None:
    """ArchiveError unless the database is at this client's schema version."""
    try:
        done = applied(conn)
    except psycopg.Error as exc:
        raise explain(exc, dsn) from None
    if not done:
        raise ArchiveError(
            f"the archive ({redact(dsn)}) has no schema yet: run `taprig archive migrate`"
        )
    _check_known(done, {m.version: m for m in migrations()}, dsn)
    if max(done) < SCHEMA_VERSION:
        raise ArchiveError(
            f"the archive ({redact(dsn)}) has schema {max(done)}, this client "
            f"needs {SCHEMA_VERSION}: run `taprig archive migrate`"
        )
