"""`taprig`: the workstation client's command line.

Logging is configured here and only here.
"""

from __future__ import annotations

import json
import subprocess
import sys
import tempfile
from pathlib import Path
from typing import Annotated, Any

import typer

app = typer.Typer(
    help="taprig workstation client: find rigs, pull completed point sets, export them.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)

# Stages of the whole job that the demo cannot show yet, in data-flow order.
NOT_YET = ("pull into a local mirror, export for fitting, quick-look check (workstation client)",)


@app.callback()
def _root() -> None:
    """taprig workstation client."""


def _daemon(*args: str) -> list[str]:
    return [sys.executable, "-m", "taprig.daemon", *args]


@app.command()
def demo(
    out: Annotated[
        Path | None, typer.Option(help="folder for the demo's files (default: a new temp folder)")
    ] = None,
    seconds: Annotated[float, typer.Option(min=5.0, help="how long the rig captures")] = 20.0,
) -> None:
    """Run the whole job on the virtual instrument and show what each stage delivers."""
    folder = out if out is not None else Path(tempfile.mkdtemp(prefix="taprig-demo-"))
    folder.mkdir(parents=True, exist_ok=True)
    truth = folder / "truth.json"
    typer.echo(f"taprig demo: a virtual aluminium access panel on a rig; files in {folder}")
    typer.echo("-- 1. device link check (taprigd probe, virtual instrument on a pseudo-terminal)")
    probe = subprocess.run(
        _daemon("probe", "--device", "virtual", "--seconds", "2", "--taps", "3"),
        capture_output=True, text=True, timeout=90,
    )  # fmt: skip
    for line in probe.stdout.splitlines():
        typer.echo(f"   {line}")
    if probe.returncode != 0:
        typer.echo(probe.stderr, err=True)
        raise typer.Exit(code=1)
    typer.echo(f"-- 2. capture (taprigd run): a simulated operator taps the grid for {seconds:g} s")
    events = _capture(folder, truth, seconds)
    done = [e for e in events if e["kind"] == "completed"]
    rejected = [e for e in events if e["kind"] == "hit" and not e["accepted"]]
    for e in done:
        typer.echo(f"   point {e['point']}: {e['averages']} averages stored (change {e['seq']})")
    for e in rejected:
        reasons = "; ".join(text for _code, text in e["rejections"])
        typer.echo(f"   rejected at {e['point']}: {reasons}")
    typer.echo(f"   {len(done)} point sets in {folder / 'rig' / 'taprig.sqlite3'}")
    typer.echo(f"-- true modal model of the virtual panel: {truth}")
    for stage in NOT_YET:
        typer.echo(f"-- not yet: {stage}")
    if not done:
        raise typer.Exit(code=1)


def _capture(folder: Path, truth: Path, seconds: float) -> list[dict[str, Any]]:
    cmd = _daemon(
        "run", "--set", f"store.data_dir={folder / 'rig'}", "--set", "store.min_free_mb=1",
        # The demo stays on this machine: loopback only, no announcement on the LAN.
        "--set", "service.bind=127.0.0.1", "--set", "service.port=0",
        "--set", "service.advertise=false",
        "--set", "capture.averages=3", "--test", "demo-panel", "--virtual-taps", "0.6",
        "--virtual-double-hits", "0.15", "--duration", str(seconds), "--truth", str(truth),
        "--json-events",
    )  # fmt: skip
    result = subprocess.run(cmd, capture_output=True, text=True, timeout=seconds + 60)
    if result.returncode != 0:
        typer.echo(result.stderr, err=True)
        raise typer.Exit(code=1)
    return [json.loads(line) for line in result.stdout.splitlines() if line.startswith("{")]


def main() -> None:
    app()


if __name__ == "__main__":
    main()
