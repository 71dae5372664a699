"""`taprig archive ...`: the archive's commands, a typer sub-app mounted by client/cli.py.

run (follow rigs into the database until stopped, or one pass with --once), migrate,
status, find (tests by rig, name, date, part type) and trend (peak frequencies of one part
type over time). `archived_tests` and `load` serve `taprig tests/export/check/fit --archive`,
`keep_model` serves `taprig fit --keep`.
Every command takes `--json`; a DSN is only ever printed without its password.
"""

from __future__ import annotations

import functools
import json
import os
import signal
import threading
from collections.abc import Callable
from datetime import UTC
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any, TypeVar

import typer

from ..errors import ClientError
from ..words import count, extra_hint

if TYPE_CHECKING:
    from .reader import ArchivedTest

app = typer.Typer(
    help="The central archive: rigs followed into PostgreSQL, read by every desk.",
    no_args_is_help=True,
)
F = TypeVar("F", bound=Callable[..., None])


def _command(fn: F) -> F:
    """A command of the sub-app whose client errors become the CLI's one-line messages."""

    @functools.wraps(fn)
    def guarded(*args: Any, **kwargs: Any) -> None:
        from ..cliparts import guard

        with guard():
            try:
                fn(*args, **kwargs)
            except ModuleNotFoundError as exc:
                if exc.name != "psycopg":
                    raise
                raise ClientError(
                    f"the archive needs psycopg: {extra_hint('archive')}"
                ) from None

    app.command()(guarded)
    return fn


JsonOption = Annotated[bool, typer.Option("--json", help="print JSON")]
DsnOption = Annotated[
    str | None,
    typer.Option(
        "--dsn", help="PostgreSQL DSN (default: $TAPRIG_ARCHIVE_DSN; passwords: ~/.pgpass)"
    ),
]
ConfigOption = Annotated[
    Path | None,
    typer.Option(
        "--config",
        help="archive configuration (TOML; default: the DSN from the environment and "
        "the rigs paired here)",
    ),
]


def _dsn(dsn: str | None) -> str:
    from .db import resolve_dsn

    return resolve_dsn(dsn, os.environ)


def _echo_json(obj: Any) -> None:
    typer.echo(json.dumps(obj, default=str))


@_command
def migrate(dsn: DsnOption = None, as_json: JsonOption = False) -> None:
    """Create or upgrade the archive's tables (plain SQL migrations, applied in order)."""
    from .db import SCHEMA_VERSION, redact
    from .db import migrate as apply

    target = _dsn(dsn)
    done = apply(target)
    names = [f"{m.version:04d}_{m.name}" for m in done]
    obj = {
        "database": redact(target),
        "applied": names,
        "schema_version": SCHEMA_VERSION,
    }
    if as_json:
        _echo_json(obj)
    else:
        typer.echo(
            f"{redact(target)}: schema {SCHEMA_VERSION}"
            + (f", applied {', '.join(names)}" if done else ", up to date")
        )


@_command
def run(
    config: ConfigOption = None,
    once: Annotated[bool, typer.Option(help="one pass over every rig, then exit")] = False,
    as_json: JsonOption = False,
) -> None:
    """Follow the rigs: store every completed point set in the archive, until stopped.

    With --json, one JSON object per line: each point set stored, each error, and the
    final status.
    """
    from .config import load
    from .db import ArchiveError
    from .follow import Archiver

    cfg = load(config)

    def event(e: dict[str, Any]) -> None:
        if as_json:
            _echo_json(e)
        elif e["event"] == "error":
            typer.echo(f"{e['rig']}: {e['error']}", err=True)
        elif e["event"] == "stored":
            typer.echo(f"{e['rig']}: {e['test']}/{e['point']} v{e['version']} ({e['bytes']} B)")

    archiver = Archiver(cfg, event, once=once).start()
    if once:
        archiver.wait()
    else:
        done = threading.Event()
        signal.signal(signal.SIGTERM, lambda *_: done.set())
        signal.signal(signal.SIGINT, lambda *_: done.set())
        while not done.wait(1.0):
            pass
        archiver.stop()
    status = archiver.status()
    if as_json:
        _echo_json({"event": "status", **status})
    failed = [r for r in status["rigs"] if r["last_error"]]
    if once and failed:
        raise ArchiveError(
            f"{len(failed)} of {len(status['rigs'])} rig(s) not archived: "
            + "; ".join(f"{r['label']}: {r['last_error']}" for r in failed)
        )


@_command
def status(dsn: DsnOption = None, as_json: JsonOption = False) -> None:
    """What the archive holds per rig, how far it is, who follows each rig, the last error."""
    from .db import LOCK_SPACE, redact
    from .reader import Archive

    with Archive(_dsn(dsn)) as archive:
        rows = archive.rows(
            "SELECT r.rig_id, r.name, r.url, r.cursor, r.follower, r.last_error, "
            "to_char(r.last_pull AT TIME ZONE 'UTC', 'YYYY-MM-DD\"T\"HH24:MI:SS\"Z\"'), "
            "(SELECT count(*) FROM point_sets p WHERE p.rig_id = r.rig_id), "
            "(SELECT coalesce(sum(size), 0) FROM point_sets p WHERE p.rig_id = r.rig_id), "
            "EXISTS (SELECT 1 FROM pg_locks l WHERE l.locktype = 'advisory' AND l.granted AND "
            "l.classid = %s::oid AND l.objid = hashtext(r.rig_id)::oid) "
            "FROM rigs r ORDER BY r.name",
            (LOCK_SPACE,),
        )
    keys = (
        "rig_id",
        "name",
        "url",
        "cursor",
        "follower",
        "last_error",
        "last_pull_utc",
        "point_sets",
        "bytes",
        "followed_now",
    )
    rigs = [dict(zip(keys, r, strict=True)) for r in rows]
    if as_json:
        _echo_json({"database": redact(archive.dsn), "rigs": rigs})
        return
    typer.echo(f"archive {redact(archive.dsn)}")
    for r in rigs:
        who = f"followed by {r['follower']}" if r["followed_now"] else "not followed now"
        typer.echo(
            f"{r['name']:<20} {r['rig_id']:<14} {count(r['point_sets'], 'point set'):>17} "
            f"{int(r['bytes']) / 1e6:9.1f} MB  cursor {r['cursor']:<8} {who}"
            + (f"; last error: {r['last_error']}" if r["last_error"] else "")
        )


@_command
def find(
    rig: Annotated[str | None, typer.Option(help="rig name or id")] = None,
    name: Annotated[str | None, typer.Option(help="test name; % and _ are wildcards")] = None,
    since: Annotated[str | None, typer.Option(help="created on or after (ISO 8601)")] = None,
    until: Annotated[str | None, typer.Option(help="created before (ISO 8601)")] = None,
    part: Annotated[str | None, typer.Option(help="part type (see `archive trend`)")] = None,
    dsn: DsnOption = None,
    as_json: JsonOption = False,
) -> None:
    """Tests across the archive, by rig, name, creation date and part type."""
    from .reader import Archive

    with Archive(_dsn(dsn)) as archive:
        found = archive.find(rig, name, since, until, part)
    if as_json:
        _echo_json({"tests": [_row(t) for t in found]})
        return
    for line in [_line(t) for t in found] or ["no archived test matches"]:
        typer.echo(line)


def _line(t: ArchivedTest) -> str:
    return (f"{t.created_utc}  {t.rig:<16} {t.test:<28} {t.part:<16} "
            f"{t.point_sets:>4}/{t.grid_points} points")  # fmt: skip


def _row(t: Any) -> dict[str, Any]:
    return {k: getattr(t, k) for k in t.__slots__}


@_command
def trend(
    part: Annotated[
        str,
        typer.Argument(
            help="the part type: a test's meta 'part', else its "
            "name without the trailing serial or date"
        ),
    ],
    dsn: DsnOption = None,
    as_json: JsonOption = False,
) -> None:
    """Peak frequencies of every archived test of one part type, oldest first."""
    from .history import trend as follow_peaks
    from .reader import Archive

    with Archive(_dsn(dsn)) as archive:
        result = follow_peaks(archive, part)
    if as_json:
        _echo_json(result.to_dict())
        return
    head = "".join(f"{f:>10.1f}" for f in result.reference_hz)
    typer.echo(f"{'part ' + part:<48}{head}  (Hz, first test's peaks)")
    for r in result.rows:
        cells = "".join(f"{f:>10.1f}" if f == f else f"{'-':>10}" for f in r.tracked_hz)
        typer.echo(f"{r.created_utc:<22}{r.rig[:12]:<13}{r.test[:12]:<13}{cells}")
    typer.echo(
        f"{'drift':<48}"
        + "".join(f"{d * 100:>9.2f}%" if d == d else f"{'-':>10}" for d in result.drift)
    )


# ---------------------------------------------------------------- for taprig tests/export/check


def keep_model(dsn: str, rig: str | None, test: str, npz: bytes,
               summary: dict[str, Any]) -> dict[str, str]:  # fmt: skip
    """`taprig fit --archive DSN --keep`: the model's npz bytes stored beside `test`."""
    from .models import put_model
    from .reader import Archive

    with Archive(_dsn(dsn), rig) as archive:
        kept = put_model(archive, test, npz, summary)
    return {"rig_id": kept.rig_id, "test": kept.test, "sha256": kept.digest,
            "created_utc": kept.created.astimezone(UTC).isoformat()}  # fmt: skip


def archived_tests(dsn: str, rig: str | None) -> tuple[dict[str, Any], list[str]]:
    """`taprig tests --archive DSN`: the archived tests, as JSON rows and as text lines."""
    from .reader import Archive

    with Archive(_dsn(dsn)) as archive:
        found = archive.find(rig=rig)
    lines = [_line(t) for t in found] or ["no archived test"]
    return {"tests": [_row(t) for t in found]}, lines
