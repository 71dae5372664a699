"""The command line's shared pieces: option types, the error guard, output, the paired rig
and its mirror, loading a test (mirror or archive), the analysis band as typed, progress.

Every command module (client/cli.py, fitting_cli.py, archive/cli.py, view/command.py)
imports these from here, so that no command module imports another for them.
"""

from __future__ import annotations

import contextlib
import json
import math
import sys
import time
from collections.abc import Callable, Iterator
from typing import TYPE_CHECKING, Annotated, Any

import typer

from .errors import ClientError

if TYPE_CHECKING:
    from .dataset import TestData
    from .mirror import Mirror
    from .remote import RigClient
    from .rigs import PairedRig

# Options several commands share, declared once.
JsonOption = Annotated[bool, typer.Option("--json", help="print one JSON document")]
RawHitsOption = Annotated[bool, typer.Option(
    "--raw-hits", help="also fetch every hit's raw record (several times the bytes; without "
    "it, hits come with their times, forces and findings only)")]  # fmt: skip
RigArgument = Annotated[
    str | None, typer.Argument(help="a paired rig's name or id (default: the only one)")
]
RigOption = Annotated[
    str | None, typer.Option("--rig", help="a paired rig's name or id (default: the only one)")
]
VerboseOption = Annotated[bool, typer.Option("--verbose", "-v", help="log at debug level")]
TestArgument = Annotated[str, typer.Argument(help="a test in the local mirror (see `tests`)")]
BandOption = Annotated[
    str | None, typer.Option("--band", help="only F1 <= f <= F2, written F1:F2 in Hz")
]


ArchiveOption = Annotated[str | None, typer.Option("--archive", help="read this archive (DSN)")]


def load_test(rig: str | None, test: str, archive: str | None = None) -> TestData:
    """A mirrored test of a paired rig (or an archived one), as arrays (offline)."""
    if archive is not None:
        import os

        from .archive.db import resolve_dsn
        from .archive.reader import Archive

        with Archive(resolve_dsn(archive, os.environ), rig) as archived:
            return archived.load(test)
    with open_mirror(find_rig(rig)) as mirror:
        return mirror.load(test)


@contextlib.contextmanager
def guard() -> Iterator[None]:
    """Client errors → one line on stderr and the error's exit code."""
    try:
        yield
    except ClientError as exc:
        typer.echo(f"taprig: {exc}", err=True)
        raise typer.Exit(code=exc.exit_code) from None
    except ValueError as exc:  # bad option values found past typer (bands, addresses, data)
        typer.echo(f"taprig: {exc}", err=True)
        raise typer.Exit(code=2) from None
    except OSError as exc:  # a file the system refused (e.g. --out in a missing folder)
        where = f"{exc.filename}: " if exc.filename else ""
        typer.echo(f"taprig: {where}{exc.strerror or exc}", err=True)
        raise typer.Exit(code=1) from None


def emit(as_json: bool, obj: Any, lines: Callable[[], list[str]]) -> None:
    if as_json:
        typer.echo(json.dumps(obj, indent=1, default=str))
    else:
        for line in lines():
            typer.echo(line)


def find_rig(which: str | None) -> PairedRig:
    from .rigs import Places, RigBook

    return RigBook(Places.from_env()).find(which)


def rig_client(rig: PairedRig) -> RigClient:
    from .remote import RigClient

    return RigClient(rig.url, rig.token)


def open_mirror(rig: PairedRig) -> Mirror:
    from .mirror import Mirror
    from .rigs import Places

    return Mirror(Places.from_env().mirror_path(rig.rig_id))


def parse_band(text: str | None) -> tuple[float, float] | None:
    """(F1, F2) Hz of a band written F1:F2; ValueError naming it otherwise."""
    if text is None:
        return None
    lo, sep, hi = text.partition(":")
    try:
        band = (float(lo), float(hi))
    except ValueError:
        band = (math.nan, math.nan)
    if not sep or not (math.isfinite(band[0]) and math.isfinite(band[1]) and
                       0 <= band[0] < band[1]):  # fmt: skip
        raise ValueError(f"--band {text!r}: write F1:F2 in Hz with 0 <= F1 < F2, e.g. 20:2000")
    return band


@contextlib.contextmanager
def progress_bar(
    quiet: bool, label: str = "pulling", min_total: int = 6, after_s: float = 0.0
) -> Iterator[Callable[[int, int], None] | None]:
    """A progress bar on a terminal for jobs of at least `min_total` steps that have run
    `after_s` seconds (pulls of more than a few point sets), else nothing."""
    if quiet or not sys.stderr.isatty():
        yield None
        return
    bar: Any = None
    shown = 0
    started = time.monotonic()

    def update(done: int, total: int) -> None:
        nonlocal bar, shown
        if bar is None and total >= min_total and time.monotonic() - started >= after_s:
            bar = typer.progressbar(length=total, label=label, file=sys.stderr)
            bar.__enter__()
        if bar is not None:
            bar.update(done - shown)
            shown = done

    try:
        yield update
    finally:
        if bar is not None:
            bar.__exit__(None, None, None)
