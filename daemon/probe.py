"""Link check: open a device, identify it, stream for a while, and report what arrived.

This is the operator's first test of a new cable, board or configuration:
no triggering, only the link layer and the sample stream, with figures a
person can compare against the device's data sheet.
"""

from __future__ import annotations

import math
import queue
import time
from dataclasses import dataclass, field
from pathlib import Path

from taprig.firmware_protocol import (
    Command,
    Decoder,
    DeviceInfo,
    DeviceInfoReceived,
    FrameEncoder,
    LinkStats,
    Opcode,
    ProtocolViolation,
    SampleBlock,
    make_decoder,
)
from taprig.firmware_protocol.simpiece import write_truth
from taprig.firmware_protocol.simpiece.instrument import (
    InstrumentSettings,
    SimulatedPiece,
    TapRecord,
    open_simulated,
)

from .capture.link import LinkChange, SerialLink

CONNECT_S = 5.0  # allowance for a device to open and start sending, seconds


@dataclass
class TapCheck:
    """One simulated tap: the force asked of the simulated hammer and the peak that arrived."""

    point: str
    asked_n: float
    measured_n: float | None


@dataclass
class ProbeReport:
    url: str
    info: DeviceInfo | None
    stats: LinkStats
    seconds: float
    samples: int
    link_changes: list[str] = field(default_factory=list)
    messages: list[str] = field(default_factory=list)
    taps: list[TapCheck] = field(default_factory=list)

    @property
    def sample_rate_seen_hz(self) -> float:
        return self.samples / self.seconds if self.seconds > 0 else 0.0


def probe(
    device: str,
    fmt: str = "binary",
    seconds: float = 3.0,
    taps: int = 0,
    text_rate_hz: float | None = None,
    truth_path: Path | None = None,
    connect_s: float = CONNECT_S,
) -> ProbeReport:
    """Open `device` (a pyserial URL, or "simulated"), stream for `seconds`, report.

    truth_path: for the simulated device, where to write its true modal model.
    connect_s: how long to wait beyond `seconds` for the first samples.
    """
    piece: SimulatedPiece | None = None
    url = device
    if device == "simulated":
        # A board printing text lines manages a few kHz, not the binary link's 51.2 kHz.
        rate = 51_200.0 if fmt == "binary" else 5_000.0
        piece = open_simulated("pty", settings=InstrumentSettings(output=fmt, rate_hz=rate))
        url = piece.url
        text_rate_hz = text_rate_hz or (rate if fmt == "text" else None)
        if truth_path is not None:
            write_truth(piece.model, truth_path)
    text_options = {"rate_hz": text_rate_hz, "rate_key": "--rate <Hz>"}
    decoder: Decoder = make_decoder(fmt, **(text_options if fmt == "text" else {}))
    link = SerialLink(url).start()
    try:
        return _stream(link, decoder, url, fmt, (seconds, connect_s), taps, piece)
    finally:
        link.close()
        if piece is not None:
            piece.close()


def _stream(
    link: SerialLink,
    dec: Decoder,
    url: str,
    fmt: str,
    times: tuple[float, float],
    n_taps: int,
    piece: SimulatedPiece | None,
) -> ProbeReport:
    seconds, connect_s = times
    enc = FrameEncoder()
    report = ProbeReport(url, None, dec.stats, seconds, 0)
    blocks: list[SampleBlock] = []
    tap_plan = [seconds * (k + 0.5) / max(n_taps, 1) for k in range(n_taps)] if piece else []
    records: list[TapRecord] = []
    started: float | None = None
    deadline = time.monotonic() + seconds + connect_s
    while True:
        now = time.monotonic()
        if started is not None and now - started >= seconds:
            break
        if now > deadline:
            report.messages.append(f"no data from {url} within the time allowed")
            break
        try:
            item = link.items.get(timeout=0.05)
        except queue.Empty:
            item = None
        if isinstance(item, LinkChange):
            report.link_changes.append(f"{item.state.value}: {item.detail}")
            if item.state.value == "connected" and fmt == "binary":
                link.send(enc.command(Command(Opcode.IDENTIFY, 1)))
                link.send(enc.command(Command(Opcode.START, 2)))
            continue
        if item:
            for ev in dec.feed(item):
                if isinstance(ev, DeviceInfoReceived):
                    report.info = ev.info
                elif isinstance(ev, SampleBlock):
                    if started is None:
                        started = time.monotonic()
                    report.samples += ev.count
                    if piece is not None:
                        blocks.append(ev)
                elif isinstance(ev, ProtocolViolation):
                    report.messages.append(ev.message)
        if piece is not None and started is not None and tap_plan and now - started >= tap_plan[0]:
            tap_plan.pop(0)
            point = piece.model.grid[len(records) * 7 % len(piece.model.grid)]
            rec = piece.tap(point)
            if rec is not None:
                records.append(rec)
    if piece is not None:
        report.taps = _check_taps(piece, records, blocks)
    return report


def _check_taps(
    piece: SimulatedPiece, records: list[TapRecord], blocks: list[SampleBlock]
) -> list[TapCheck]:
    """Peak of the force channel over each tap's pulse, in N, from the blocks that hold it."""
    volts_per_n = piece.sensitivities()[0]
    out = []
    for r in records:
        lo = r.first_index
        hi = lo + math.ceil(r.width_s * piece.rate_hz) + 2
        peaks = [
            float(b.volts[0, max(lo - b.first_index, 0) : hi - b.first_index].max())
            for b in blocks
            if b.first_index < hi and b.end_index > lo
        ]
        out.append(TapCheck(r.point, r.peak_n, max(peaks) / volts_per_n if peaks else None))
    return out
