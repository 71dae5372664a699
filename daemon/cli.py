"""`taprigd`: the command line of the capture daemon.

Logging is configured here and only here. Each command is a thin shell over
a part of the daemon; the parts never print.
"""

from __future__ import annotations

import logging
import signal
import threading
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


class InputFormat(StrEnum):
    binary = "binary"
    text = "text"


class Transport(StrEnum):
    pty = "pty"
    tcp = "tcp"


def _setup_logging(verbose: bool) -> None:
    logging.basicConfig(
        level=logging.DEBUG if verbose else logging.INFO,
        format="%(asctime)s %(levelname)s %(name)s: %(message)s",
    )


@app.command()
def probe(
    device: Annotated[
        str, typer.Option(help="pyserial URL (/dev/ttyACM0, socket://host:port, ...) or 'virtual'")
    ] = "virtual",
    fmt: Annotated[InputFormat, typer.Option("--format", help="input format")] = InputFormat.binary,
    seconds: Annotated[float, typer.Option(min=0.2, help="how long to stream")] = 3.0,
    taps: Annotated[int, typer.Option(min=0, help="virtual device only: simulated taps")] = 4,
    rate: Annotated[
        float | None, typer.Option(help="text input: sample rate in Hz if the device does not say")
    ] = None,
    truth: Annotated[
        Path | None, typer.Option(help="virtual device only: write its true modal model (JSON)")
    ] = None,
    verbose: Annotated[bool, typer.Option("--verbose", "-v")] = False,
) -> None:
    """Check a device link: identify the device, stream, and report what arrived."""
    from .probe import probe as run_probe

    _setup_logging(verbose)
    report = run_probe(
        device, fmt.value, seconds, taps if device == "virtual" else 0, rate, truth_path=truth
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
    verbose: Annotated[bool, typer.Option("--verbose", "-v")] = False,
) -> None:
    """Run the virtual instrument on its own until interrupted (for demos and manual tests)."""
    from taprig.firmware_protocol.virtual import write_truth
    from taprig.firmware_protocol.virtual.control import ControlServer
    from taprig.firmware_protocol.virtual.instrument import InstrumentSettings, open_virtual

    _setup_logging(verbose)
    vi = open_virtual(
        transport.value,
        link=str(link) if link else None,
        settings=InstrumentSettings(output=fmt.value),
    )
    server = ControlServer(vi, port=control).start()
    if truth is not None:
        write_truth(vi.model, truth)
    typer.echo(f"device  {vi.url}")
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
        vi.close()


def main() -> None:
    app()


if __name__ == "__main__":
    main()
