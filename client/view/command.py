"""`taprig view`: a mirrored test's FRFs, stabilization diagram, modes and animated shapes
in the browser, from a page served on loopback; or, with --save, pictures for reports.

Registered in client/cli.py; everything heavy is imported when the command runs.
"""

from __future__ import annotations

import sys
import webbrowser
from pathlib import Path
from typing import TYPE_CHECKING, Annotated

import typer

if TYPE_CHECKING:
    from ..dataset import TestData
    from .geometry import Geometry

__all__ = ["view"]


def _latest_test(rig: str | None) -> str:
    """The mirrored test created last (the one a user most likely means)."""
    from ..cliparts import find_rig, open_mirror
    from ..errors import MirrorError

    with open_mirror(find_rig(rig)) as mirror:
        tests = [t for t in mirror.tests() if mirror.counts().get(t.name)]
    if not tests:
        raise MirrorError("the mirror holds no measured test yet; run  taprig pull  first")
    return max(tests, key=lambda t: t.created_utc).name


def _geometry(data: TestData, path: Path | None) -> Geometry:
    from .outline import geometry_of, read_outline

    return geometry_of(data) if path is None else read_outline(path, data.grid)


def view(
    test: Annotated[
        str | None, typer.Argument(help="a mirrored test (default: the one created last)")
    ] = None,
    rig: Annotated[
        str | None, typer.Option("--rig", help="a paired rig's name or id (default: the only one)")
    ] = None,
    port: Annotated[int, typer.Option(min=0, max=65535, help="loopback port (0: any free)")] = 0,
    geometry: Annotated[
        Path | None,
        typer.Option(
            help="outline file of the structure's faces and lines (default: the "
            "test's own outline, else its grid)"
        ),
    ] = None,
    save: Annotated[
        Path | None,
        typer.Option(help="write a GIF per mode and a PNG sheet into this folder, then stop"),
    ] = None,
    no_browser: Annotated[
        bool, typer.Option("--no-browser", help="serve the page without opening a browser")
    ] = False,
) -> None:
    """Look at a test's modes: FRFs, stabilization diagram, mode table, MAC, animated shapes.

    Serves a page on 127.0.0.1 (nothing loaded from elsewhere) and opens it in the browser;
    Ctrl-C stops. Works offline from the local mirror.
    """
    from ..cliparts import guard, load_test
    from .modes import modes_for

    with guard():
        name = test if test is not None else _latest_test(rig)
        data = load_test(rig, name)
        shape = _geometry(data, geometry)
        modes = modes_for(data)
        if save is not None:
            from .pictures import write_mode_pictures

            for path in write_mode_pictures(data, modes, shape, save):
                typer.echo(f"picture {path}")
            return
        from .server import ViewServer, run_view

        server = ViewServer(data, modes, shape)

    def opened(url: str) -> None:
        typer.echo(f"taprig view: {name} at {url} (modes: {modes.label}); Ctrl-C to stop")
        sys.stdout.flush()
        if not no_browser:
            webbrowser.open(url)

    try:
        run_view(server, port, opened)
    except OSError as exc:  # the port is taken or not ours to use
        typer.echo(f"taprig: cannot serve on 127.0.0.1:{port}: {exc.strerror or exc}", err=True)
        raise typer.Exit(code=1) from None
