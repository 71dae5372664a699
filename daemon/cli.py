"""`taprigd`: the command line of the capture daemon.

Logging is configured here and only here. Each command is a thin shell over
a part of the daemon; the parts never print.
"""

from __future__ import annotations

import contextlib
import json
import logging
import signal
import threading
from collections.abc import Iterator
from enum import StrEnum
from pathlib import Path
from typing import Annotated

import typer

app = typer.Typer(
    help="taprig capture daemon: reads a hammer-and-accelerometer device over a serial link.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)


# Options several commands share, declared once.
ConfigOption = Annotated[Path | None, typer.Option("--config", "-c", help="TOML configuration")]
SetOption = Annotated[
    list[str] | None, typer.Option("--set", help="override a setting: section.key=value")
]
VerboseOption = Annotated[bool, typer.Option("--verbose", "-v", help="log at debug level")]


class InputFormat(StrEnum):
    binary = "binary"
    text = "text"


class Transport(StrEnum):
    pty = "pty"
    tcp = "tcp"


@contextlib.contextmanager
def _guard() -> Iterator[None]:
    """The one place daemon errors become exit codes: a line on stderr and the error's code
    (daemon/errors.py); a bad value found past typer exits 2; Ctrl-C ends quietly."""
    from .errors import TaprigError

    try:
        yield
    except TaprigError as exc:
        typer.echo(f"taprigd: {exc}", err=True)
        raise typer.Exit(code=exc.exit_code) from None
    except ValueError as exc:  # e.g. a pairing host that is no host
        typer.echo(f"taprigd: {exc}", err=True)
        raise typer.Exit(code=2) from None
    except OSError as exc:  # a file or port the system refused: say which, never a traceback
        where = f"{exc.filename}: " if exc.filename else ""
        typer.echo(f"taprigd: {where}{exc.strerror or exc}", err=True)
        raise typer.Exit(code=1) from None
    except KeyboardInterrupt:
        pass


def _setup_logging(verbose: bool) -> None:
    """Log to stderr (stdout carries --json-events). Under systemd, whose journal stamps the
    time itself, each line starts with its syslog priority (``<4>`` for a warning), which the
    journal records as the entry's level (sd-daemon(3))."""
    from .logrepeat import RepeatFilter

    level = logging.DEBUG if verbose else logging.INFO
    handler = logging.StreamHandler()
    if _stderr_is_journal():
        handler.setFormatter(_JournalFormatter("%(levelname)s %(name)s: %(message)s"))
    else:
        handler.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(name)s: %(message)s"))
    # Repeated warnings and errors, and every line of the service's door, folded per minute.
    handler.addFilter(RepeatFilter(loggers=("taprig.daemon.api.gate",)))
    logging.basicConfig(level=level, handlers=[handler])


def _stderr_is_journal() -> bool:
    """True if stderr is the journal's stream ($JOURNAL_STREAM names its device and inode)."""
    import os
    import sys

    try:
        st = os.fstat(sys.stderr.fileno())
    except (OSError, ValueError):
        return False
    return os.environ.get("JOURNAL_STREAM", "") == f"{st.st_dev}:{st.st_ino}"


_PRIORITY = {logging.DEBUG: 7, logging.INFO: 6, logging.WARNING: 4, logging.ERROR: 3}


class _JournalFormatter(logging.Formatter):
    def format(self, record: logging.LogRecord) -> str:
        priority = _PRIORITY.get(record.levelno, 2)  # CRITICAL and above: 2
        return f"<{priority}>" + super().format(record).replace("\n", f"\n<{priority}>")


@app.command()
def probe(
    device: Annotated[
        str,
        typer.Option(help="pyserial URL (/dev/ttyACM0, socket://host:port, ...) or 'simulated'"),
    ] = "simulated",
    fmt: Annotated[InputFormat, typer.Option("--format", help="input format")] = InputFormat.binary,
    seconds: Annotated[float, typer.Option(min=0.2, help="how long to stream")] = 3.0,
    taps: Annotated[int, typer.Option(min=0, help="simulated device only: taps to strike")] = 4,
    rate: Annotated[
        float | None, typer.Option(help="text input: sample rate in Hz if the device does not say")
    ] = None,
    truth: Annotated[
        Path | None, typer.Option(help="simulated device only: write its true modal model (JSON)")
    ] = None,
    verbose: VerboseOption = False,
) -> None:
    """Check a device link: identify the device, stream, and report what arrived."""
    from .probe import probe as run_probe

    _setup_logging(verbose)
    report = run_probe(
        device, fmt.value, seconds, taps if device == "simulated" else 0, rate, truth_path=truth
    )
    info = report.info
    typer.echo(f"device      {report.url}")
    if info is None:
        typer.echo("info        none received")
    else:
        fs = ", ".join(f"±{c.full_scale_v:g} V/{c.adc_bits} bit" for c in info.channels)
        typer.echo(
            f"info        {info.device_id} firmware {info.firmware or '-'}, protocol "
            f"{info.protocol_version}, {info.channel_count} channels "
            f"{info.sample_format.name.lower()} at {info.rate_hz:g} Hz ({fs})"
        )
    st = report.stats
    typer.echo(
        f"stream      {report.samples} sample frames in {report.seconds:g} s "
        f"({report.sample_rate_seen_hz:.0f}/s), {st.bytes_in} bytes"
    )
    typer.echo(
        f"link        frames ok {st.frames_ok}, CRC errors {st.crc_errors}, resyncs {st.resyncs}, "
        f"frames lost {st.frames_lost}, samples lost {st.samples_lost}, "
        f"malformed lines {st.malformed_lines}"
    )
    for change in report.link_changes:
        typer.echo(f"state       {change}")
    for message in report.messages:
        typer.echo(f"message     {message}")
    for tap in report.taps:
        seen = "not seen" if tap.measured_n is None else f"{tap.measured_n:.1f} N peak seen"
        typer.echo(f"tap         {tap.point}: {tap.asked_n:.1f} N struck, {seen}")
    if info is None or report.samples == 0:
        raise typer.Exit(code=1)


@app.command()
def instrument(
    transport: Annotated[
        Transport, typer.Option(help="pty (USB serial stand-in) or tcp (Wi-Fi)")
    ] = (Transport.pty),
    link: Annotated[
        Path | None, typer.Option(help="pty only: stable symlink to the tty, kept across replugs")
    ] = None,
    fmt: Annotated[
        InputFormat, typer.Option("--format", help="output format")
    ] = InputFormat.binary,
    control: Annotated[
        int, typer.Option(help="loopback TCP port of the control interface (0: any free port)")
    ] = 0,
    truth: Annotated[
        Path | None, typer.Option(help="write the true modal model here (JSON)")
    ] = None,
    verbose: VerboseOption = False,
) -> None:
    """Run the simulated test piece on its own until interrupted (for demos and manual tests)."""
    from taprig.firmware_protocol.simpiece import write_truth
    from taprig.firmware_protocol.simpiece.control import ControlServer
    from taprig.firmware_protocol.simpiece.instrument import InstrumentSettings, open_simulated

    _setup_logging(verbose)
    piece = open_simulated(
        transport.value,
        link=str(link) if link else None,
        settings=InstrumentSettings(output=fmt.value),
    )
    server = ControlServer(piece, port=control).start()
    if truth is not None:
        write_truth(piece.model, truth)
    typer.echo(f"device  {piece.url}")
    typer.echo(
        f'control 127.0.0.1:{server.port}  (JSON lines, e.g. {{"op": "tap", "point": "B3"}})'
    )
    stop = threading.Event()
    signal.signal(signal.SIGTERM, lambda *_: stop.set())
    try:
        stop.wait()
    except KeyboardInterrupt:
        pass
    finally:
        server.close()
        piece.close()


# `taprigd run`'s options about the test and the simulated piece, declared apart so that the
# command reads as its list of parts.
ReferenceOption = Annotated[
    str | None,
    typer.Option(help="hammer point (sensor mode); in hammer mode where the first response "
                 "sensor sits, the same as --sensor-at for it"),
]  # fmt: skip
SensorAtOption = Annotated[
    list[str] | None,
    typer.Option(
        "--sensor-at",
        help="hammer mode, a new test: where a response sensor sits, LABEL=WHERE\\[/DIR]: "
        "a grid label or x,y,z in metres, then +x..-z or a vector (default +z); e.g. "
        "acc1=B3/+z; once per sensor (the \\[\\[channels]] location is the default)",
    ),
]
SimSpeedOption = Annotated[
    float,
    typer.Option(
        min=0.1, max=16.0,
        help="simulated device only: simulated seconds per wall second (above 1: faster "
        "than real time, for demonstrations)",
    ),
]  # fmt: skip


class Roving(StrEnum):
    hammer = "hammer"
    sensor = "sensor"


OutlineOption = Annotated[
    Path | None,
    typer.Option(
        help="the structure's faces and lines for the new test (outline text; default: "
        "<grid>.outline beside the --grid file, when there is one)"
    ),
]


@app.command()
def run(
    config: ConfigOption = None,
    set_: SetOption = None,
    test: Annotated[str | None, typer.Option(help="test to select (created with --grid)")] = None,
    grid: Annotated[
        Path | None,
        typer.Option(
            help="CSV grid (label,x,y,z[,direction], metres) for a new test; "
            "on the simulated device a new test takes the simulated structure's grid"
        ),
    ] = None,
    outline: OutlineOption = None,
    roving: Annotated[Roving, typer.Option(help="what moves between points")] = Roving.hammer,
    reference: ReferenceOption = None,
    sensor_at: SensorAtOption = None,
    duration: Annotated[float, typer.Option(help="stop after this many seconds (0: run on)")] = 0.0,
    sim_taps: Annotated[
        float, typer.Option(help="simulated device only: a simulated operator taps every N s")
    ] = 0.0,
    sim_double_hits: Annotated[
        float, typer.Option(min=0.0, max=1.0, help="simulated device only: share of double hits")
    ] = 0.0,
    truth: Annotated[
        Path | None, typer.Option(help="simulated device only: write its true modal model (JSON)")
    ] = None,
    sim_control: Annotated[
        int | None,
        typer.Option(
            min=0,
            max=65535,
            help="simulated device only: serve its control interface (taps, faults) on this "
            "loopback port (0: any free port; recorded in <data_dir>/run.json)",
        ),
    ] = None,
    sim_speed: SimSpeedOption = 1.0,
    json_events: Annotated[
        bool, typer.Option("--json-events", help="print every rig event as a JSON line")
    ] = False,
    verbose: VerboseOption = False,
) -> None:
    """Capture: open the device, select a test, arm, and store every completed point set."""
    import asyncio

    from .config import load_config
    from .records import RovingMode
    from .run import RunOptions
    from .run import run as run_daemon

    _setup_logging(verbose)
    with _guard():
        places = tuple(_sensor_flag(text) for text in sensor_at or [])
        options = RunOptions(test, grid, RovingMode(roving.value), reference, duration,
                             sim_taps, sim_double_hits, truth, json_events,
                             sim_control, outline=outline, sim_speed=sim_speed,
                             sensor_at=places)  # fmt: skip
        cfg = load_config(config, set_ or [])
        asyncio.run(run_daemon(cfg, options))


def _sensor_flag(text: str) -> tuple[str, str, str]:
    from . import placement
    from .errors import ConfigError

    try:
        return placement.split_flag(text)
    except ValueError as exc:
        raise ConfigError(str(exc)) from None


@app.command()
def pair(
    config: ConfigOption = None,
    set_: SetOption = None,
    host: Annotated[
        str | None,
        typer.Option(help="address workstations reach the rig at (default: where it listens)"),
    ] = None,
    rotate: Annotated[
        bool, typer.Option("--rotate", help="make a new token; paired workstations must pair again")
    ] = False,
) -> None:
    """Print the pairing address and a QR code for a phone camera."""
    from .config import load_config
    from .errors import TaprigError
    from .pairing import pair_command_output, reach

    try:
        cfg = load_config(config, set_ or [])
        where = reach(cfg.store.data_dir, cfg.service.bind, cfg.service.port, _lan_address, host)
        text = pair_command_output(cfg.store.data_dir, where.host, where.port, rotate, where.notes)
    except (TaprigError, ValueError) as exc:
        typer.echo(f"taprigd: {exc}", err=True)
        raise typer.Exit(code=getattr(exc, "exit_code", 2)) from None
    typer.echo(text)


@app.command()
def status(
    config: ConfigOption = None,
    set_: SetOption = None,
    as_json: Annotated[bool, typer.Option("--json", help="print the summary as JSON")] = False,
) -> None:
    """Summarise the rig on this board: device, link errors, test, store size, free disk.

    Exit code 0 when taprigd runs and answers, 1 when it does not (2: configuration error).
    """
    from .config import load_config
    from .status import gather, render

    with _guard():
        cfg = load_config(config, set_ or [])
    summary = gather(cfg)
    if as_json:
        typer.echo(json.dumps(summary, indent=2))
    else:
        for line in render(summary):
            typer.echo(line)
    if not summary["running"]:
        raise typer.Exit(code=1)


def _lan_address() -> str:
    """The first IPv4 address of a non-loopback interface, else 127.0.0.1."""
    import ipaddress

    import ifaddr

    for adapter in ifaddr.get_adapters():
        for ip in adapter.ips:
            if isinstance(ip.ip, str) and not ipaddress.ip_address(ip.ip).is_loopback:
                return ip.ip
    return "127.0.0.1"


def main() -> None:
    app()


if __name__ == "__main__":
    main()
