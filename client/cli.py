"""`taprig`: the workstation client's command line.

Logging is configured here and only here; errors become exit codes in one place
(`cliparts.guard`, shared with every command module).
Every command takes `--json` and then prints one JSON document on stdout.
"""

from __future__ import annotations

import contextlib
import json
import logging
import signal
import tempfile
import threading
from enum import StrEnum
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any

import typer

from .archive.cli import app as archive_app
from .cliparts import (
    ArchiveOption,
    BandOption,
    JsonOption,
    RawHitsOption,
    RigArgument,
    RigOption,
    TestArgument,
    VerboseOption,
    emit,
    find_rig,
    guard,
    load_test,
    open_mirror,
    parse_band,
    progress_bar,
    rig_client,
)
from .errors import ClientError
from .words import count

if TYPE_CHECKING:
    from .pull import PullReport

app = typer.Typer(
    help="taprig workstation client: find rigs, pull completed point sets, export them.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)
app.add_typer(archive_app, name="archive")



@app.callback()
def _root(verbose: VerboseOption = False) -> None:
    """taprig workstation client."""
    logging.basicConfig(
        level=logging.DEBUG if verbose else logging.WARNING,
        format="%(asctime)s %(levelname)s %(name)s: %(message)s",
    )


# ---------------------------------------------------------------- the LAN


@app.command()
def discover(
    timeout: Annotated[float, typer.Option(min=0.5, help="how long to listen, seconds")] = 3.0,
    interface: Annotated[
        list[str] | None,
        typer.Option(help="listen only on this interface address (repeatable; default: all)"),
    ] = None,
    as_json: JsonOption = False,
) -> None:
    """List the rigs announcing themselves on the LAN (mDNS)."""
    from zeroconf import InterfaceChoice

    from .discover import discover as browse

    with guard():
        rigs = browse(timeout, interface or InterfaceChoice.All)
    rows: list[dict[str, Any]] = [
        {"name": r.name, "id": r.rig_id, "addresses": list(r.addresses), "port": r.port,
         "api": r.api, "running": r.running, "test": r.test} for r in rigs
    ]  # fmt: skip

    def lines() -> list[str]:
        if not rigs:
            return [f"no rig answered within {timeout:g} s"]
        out = []
        for r in rigs:
            where = f"{r.addresses[0]}:{r.port}" if r.addresses else "?"
            state = f"running {r.test}" if r.running else "idle"
            out.append(f"{r.name:<24} {r.rig_id:<14} http://{where:<22} {state}")
        return out

    emit(as_json, {"rigs": rows}, lines)


@app.command()
def pair(
    url: Annotated[str, typer.Argument(help="the pairing address `taprigd pair` printed")],
    as_json: JsonOption = False,
) -> None:
    """Remember a rig and its token (in the user's config folder, file mode 0600)."""
    from .remote import RigClient
    from .rigs import PairedRig, Places, RigBook, parse_pairing_url

    with guard():
        base, token = parse_pairing_url(url)
        with RigClient(base, token) as client:
            info = client.info()
            client.state()  # the token works (401 otherwise)
        rig = PairedRig(info.rig_id, info.name, base, token)
        book = RigBook(Places.from_env())
        book.save(rig)
    obj = {"name": rig.name, "id": rig.rig_id, "url": rig.url, "file": str(book.places.rigs_file)}
    emit(as_json, obj, lambda: [f"paired with {rig.name} ({rig.rig_id}) at {rig.url}"])


@app.command()
def status(rig: RigArgument = None, as_json: JsonOption = False) -> None:
    """The rig's state: device, link, current test and point, armed or not."""
    with guard():
        paired = find_rig(rig)
        with rig_client(paired) as client:
            state = client.state()

    def lines() -> list[str]:
        s, link = state["session"], state["session"]["link"]
        device = state.get("device") or {}
        return [
            f"rig      {state['rig']} ({paired.rig_id}) at {paired.url}",
            f"device   {s['device']} {s['state']}"
            + (f", {device.get('id')} at {device.get('rate_hz'):g} Hz" if device else ""),
            f"link     CRC errors {link['crc_errors']}, samples lost {link['samples_lost']}, "
            f"resyncs {link['resyncs']}, reconnects {link['reconnects']}",
            f"test     {s['test'] or '-'}; point {s['point'] or '-'} "
            f"({s['averages']}/{s['required']} averages), {count(len(s['done']), 'point')} done, "
            + ("armed" if s["armed"] else "not armed"),
            f"changes  last seq {state['last_seq']}",
        ]

    emit(as_json, state, lines)


@app.command()
def tests(
    rig: RigArgument = None, archive: ArchiveOption = None, as_json: JsonOption = False
) -> None:
    """The rig's tests, with what the local mirror holds of each (or the archive's tests)."""
    if archive is not None:
        from .archive.cli import archived_tests

        with guard():
            listed, text = archived_tests(archive, rig)
        return emit(as_json, listed, lambda: text)
    with guard():
        paired = find_rig(rig)
        with rig_client(paired) as client:
            found = client.tests()
            points = client.points()
        with open_mirror(paired) as mirror:
            here = mirror.counts()
    on_rig: dict[str, int] = {}
    for p in points:
        on_rig[p.test] = on_rig.get(p.test, 0) + 1
    rows: list[dict[str, Any]] = [
            {"name": t.name, "roving_mode": t.roving_mode, "reference": t.reference,
             "grid_points": len(t.grid), "averages": t.averages, "created_utc": t.created_utc,
             "point_sets_on_rig": on_rig.get(t.name, 0),
             "point_sets_mirrored": here.get(t.name, 0)} for t in found]  # fmt: skip

    def lines() -> list[str]:
        out = [f"{r['name']:<24} {r['roving_mode']:<7} {count(r['grid_points'], 'point'):>11}  "
               f"{count(r['point_sets_on_rig'], 'point set'):>14} on the rig, "
               f"{r['point_sets_mirrored']:>4} mirrored" for r in rows]  # fmt: skip
        return out or ["no tests yet"]

    emit(as_json, {"tests": rows}, lines)


# ---------------------------------------------------------------- pulling


def _report_json(report: PullReport, mirror: Path) -> dict[str, Any]:
    return {"tests": report.tests, "point_sets": report.point_sets,
            "already_here": report.already_here, "bytes": report.bytes,
            "seconds": round(report.seconds, 3), "cursor": report.cursor,
            "mirror": str(mirror)}  # fmt: skip


@app.command()
def pull(
    rig: RigArgument = None,
    test: Annotated[str | None, typer.Option(help="only this test's point sets")] = None,
    raw_hits: RawHitsOption = False,
    as_json: JsonOption = False,
) -> None:
    """Bring the local mirror up to date: new tests and point sets, verified by checksum.

    Safe to stop at any moment and run again: nothing is fetched twice or missed.
    """
    from .pull import pull as do_pull

    with guard():
        paired = find_rig(rig)
        with (
            rig_client(paired) as client,
            open_mirror(paired) as mirror,
            progress_bar(as_json) as bar,
        ):
            report = do_pull(client, mirror, test, progress=bar, with_hits=raw_hits)
            path = mirror.path
    obj = _report_json(report, path)
    emit(as_json, obj, lambda: [
        f"{count(report.point_sets, 'new point set')} ({report.bytes / 1e6:.1f} MB, "
        f"{report.mb_per_s:.1f} MB/s), {count(report.tests, 'test')}, "
        f"{report.already_here} already here; mirror {path}"])  # fmt: skip


@app.command()
def watch(
    rig: RigArgument = None, raw_hits: RawHitsOption = False, as_json: JsonOption = False
) -> None:
    """Follow the rig: pull each point set as it completes, until interrupted."""
    from .pull import watch as follow

    stopping = threading.Event()

    def interrupt(signum: int, frame: object) -> None:
        # The flag stops the loop at its next turn even if the KeyboardInterrupt, raised at
        # whatever line the main thread is on, lands in a destructor and is swallowed there.
        stopping.set()
        raise KeyboardInterrupt

    signal.signal(signal.SIGTERM, interrupt)  # stop as Ctrl-C does, even mid long-poll
    signal.signal(signal.SIGINT, interrupt)

    def on_pull(report: PullReport) -> None:
        for s in report.new:
            if as_json:
                row = {"test": s.test, "point": s.point, "version": s.version, "id": s.id,
                       "seq": s.seq, "n_averages": s.n_averages}  # fmt: skip
                typer.echo(json.dumps(row))
            else:
                typer.echo(f"{s.completed_utc}  {s.test}/{s.point} v{s.version}: "
                           f"{s.n_averages} averages (change {s.seq})")  # fmt: skip

    with guard():
        paired = find_rig(rig)
        with rig_client(paired) as client, open_mirror(paired) as mirror:
            if not as_json:
                typer.echo(f"following {paired.name} at {paired.url}; Ctrl-C to stop")
            with contextlib.suppress(KeyboardInterrupt):
                follow(client, mirror, on_pull, stopping.is_set, with_hits=raw_hits)


# ---------------------------------------------------------------- the mirror, offline


class Format(StrEnum):
    npz = "npz"
    hdf5 = "hdf5"
    csv = "csv"


class Quantity(StrEnum):
    accelerance = "accelerance"
    mobility = "mobility"
    receptance = "receptance"


@app.command()
def export(
    test: TestArgument,
    fmt: Annotated[Format, typer.Option("--format", help="file format")] = Format.npz,
    quantity: Annotated[
        Quantity, typer.Option("--as", help="FRF quantity: as measured, or divided by iω, -ω²")
    ] = Quantity.accelerance,
    band: BandOption = None,
    out: Annotated[
        Path | None, typer.Option(help="file to write (default: <test>.<format> here)")
    ] = None,
    rig: RigOption = None,
    archive: ArchiveOption = None,
    as_json: JsonOption = False,
) -> None:
    """Write a mirrored test for fitting elsewhere: npz, HDF5 or CSV (works offline)."""
    from .export import export as write

    with guard():
        data = load_test(rig, test, archive)
        suffix = {"npz": ".npz", "hdf5": ".h5", "csv": ".csv"}[fmt.value]
        target = out or Path(f"{test}{suffix}")
        if not target.absolute().parent.is_dir():
            raise ClientError(f"cannot write {target}: the folder {target.parent} does not exist")
        path = write(data, target, fmt.value, quantity.value, parse_band(band))
    obj = {"file": str(path), "points": len(data.points), "responses": list(data.responses),
           "quantity": quantity.value, "format": fmt.value, "coverage": data.coverage,
           "unmeasured": list(data.unmeasured)}  # fmt: skip
    partial = f" (partial: {len(data.unmeasured)} not measured)" if data.unmeasured else ""
    emit(as_json, obj, lambda: [f"{data.coverage} of {test}{partial} as {quantity.value} "
                                 f"-> {path}"])  # fmt: skip


@app.command()
def check(
    test: TestArgument,
    band: BandOption = None,
    plots: Annotated[
        Path | None, typer.Option(help="also draw PNG plots into this folder (plots extra)")
    ] = None,
    rig: RigOption = None,
    archive: ArchiveOption = None,
    as_json: JsonOption = False,
) -> None:
    """Quick-look report: averages, rejections, coherence, force band, a mode table."""
    from .check import CheckSettings, report_text
    from .check import check as run_check

    with guard():
        data = load_test(rig, test, archive)
        result = run_check(data, CheckSettings(band_hz=parse_band(band)))
        drawn: list[Path] = []
        if plots is not None:
            from .plots import write_plots

            drawn = write_plots(data, result, plots)
    obj = {**result.to_dict(), "plots": [str(p) for p in drawn]}
    emit(as_json, obj, lambda: [report_text(result).rstrip("\n"),
                                 *(f"plot {p}" for p in drawn)])  # fmt: skip


@app.command()
def demo(
    out: Annotated[
        Path | None, typer.Option(help="folder for the demo's files (default: a new temp folder)")
    ] = None,
    plots: Annotated[bool, typer.Option(help="draw the PNG plots (needs the plots extra)")] = True,
) -> None:
    """Run the whole job on the simulated test piece: capture, pull, export, check, plots."""
    from .demo import run_demo

    folder = out if out is not None else Path(tempfile.mkdtemp(prefix="taprig-demo-"))
    typer.echo(f"taprig demo: a roving-hammer test of a simulated aluminium panel; files in "
               f"{folder}")
    with guard():
        result = run_demo(folder, typer.echo, plots=plots)
    typer.echo(f"-- done in {result.seconds:.1f} s: {result.npz}, {result.check}, {result.truth}")
    for name, seconds in result.stages.items():
        typer.echo(f"   {name:<20} {seconds:5.1f} s")
    typer.echo(result.check.read_text(encoding="utf-8").split("\n\n")[0])
    for line in result.mode_table:
        typer.echo(line)


from .fitting_cli import register as _register_fit  # noqa: E402 (needs the helpers above)

_register_fit(app)


from .view.command import view  # noqa: E402  (its own module; heavy imports run inside)

app.command()(view)


def main() -> None:
    app()


if __name__ == "__main__":
    main()
