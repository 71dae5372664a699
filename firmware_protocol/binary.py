"""Incremental decoder of the binary framed stream (PROTOCOL.md sections 1 to 3).

Fed byte chunks split anywhere, it returns events in stream order. The only
per-frame Python work is the envelope check; the samples of consecutive DATA
frames are gathered and converted in one numpy pass per call to `feed`.
"""

from __future__ import annotations

import numpy as np

from . import frames as fr
from .events import (
    AckReceived,
    BadCommand,
    CommandReceived,
    CrcError,
    DeviceInfoReceived,
    Event,
    FramesLost,
    Gap,
    IndexReset,
    LinkStats,
    ProtocolViolation,
    Resync,
    SampleBlock,
    StatusReceived,
)
from .samples import codes_to_volts, unpack_codes

_M0, _M1 = fr.MAGIC[0], fr.MAGIC[1]


class BinaryDecoder:
    """Turns a stream of framed bytes into events. One instance per connection."""

    name = "binary"

    def __init__(self) -> None:
        self._buf = bytearray()
        self._aligned = False  # position is where the last good frame said the next starts
        self._last_seq: int | None = None
        self._info: fr.DeviceInfo | None = None
        self._scale: np.ndarray | None = None
        self._next_index: int | None = None
        self._skipped = 0
        self._warned_no_info = False
        self._run_first = 0
        self._run_end = 0
        self._run: list[memoryview] = []
        self.stats = LinkStats()

    @property
    def info(self) -> fr.DeviceInfo | None:
        """The last valid INFO received, kept across reconnects of the same decoder."""
        return self._info

    def reset_link(self) -> None:
        """Forget framing state after a reconnect; keep the device information."""
        self._buf.clear()
        self._aligned = False
        self._last_seq = None
        self._next_index = None
        self._skipped = 0

    def feed(self, chunk: bytes | bytearray | memoryview) -> list[Event]:
        """Decode as much of the stream as is complete; keep the rest for the next call."""
        self.stats.bytes_in += len(chunk)
        buf = self._buf
        buf += chunk
        events: list[Event] = []
        view = memoryview(buf)
        try:
            pos = self._scan(buf, view, events)
            self._flush_run(events)
        finally:
            self._run.clear()
            view.release()
        del buf[:pos]
        return events

    # --- framing ------------------------------------------------------------

    def _scan(self, buf: bytearray, view: memoryview, events: list[Event]) -> int:
        pos = 0
        n = len(buf)
        while n - pos >= 2:
            if buf[pos] != _M0 or buf[pos + 1] != _M1:
                nxt = buf.find(fr.MAGIC, pos)
                if nxt < 0:
                    # Keep a trailing first magic byte: its partner may be in the next chunk.
                    stop = n - 1 if buf[n - 1] == _M0 else n
                    self._skip(stop - pos)
                    return stop
                self._skip(nxt - pos)
                pos = nxt
            if n - pos < fr.HEADER_SIZE:
                break
            header = fr.parse_header(buf, pos)
            if header is None:
                if self._aligned:
                    self._count_crc(events, "header")
                self._skip(1)
                pos += 1
                continue
            version, frame_type, seq, length = header
            if n - pos < length + fr.OVERHEAD:
                break
            if not fr.frame_crc_ok(buf, pos, length):
                self._count_crc(events, "frame")
                self._skip(1)
                pos += 1
                continue
            self._good_frame(events, seq)
            start = pos + fr.HEADER_SIZE
            pos = start + length + fr.TRAILER_SIZE
            if version != fr.PROTOCOL_VERSION:
                self._violation(
                    events,
                    f"frame of protocol version {version} skipped; this host speaks version "
                    f"{fr.PROTOCOL_VERSION}",
                )
                continue
            self._dispatch(events, frame_type, view[start : start + length])
        return pos

    def _skip(self, count: int) -> None:
        if count > 0:
            self._skipped += count
            self._aligned = False

    def _count_crc(self, events: list[Event], kind: str) -> None:
        self._flush_run(events)
        if kind == "header":
            self.stats.header_crc_errors += 1
        else:
            self.stats.frame_crc_errors += 1
        events.append(CrcError(kind))

    def _good_frame(self, events: list[Event], seq: int) -> None:
        if self._skipped:
            self._flush_run(events)
            self.stats.resyncs += 1
            self.stats.bytes_skipped += self._skipped
            events.append(Resync(self._skipped))
            self._skipped = 0
        if self._last_seq is not None:
            lost = (seq - self._last_seq - 1) & 0xFFFF
            if lost >= 0x8000:
                # The counter went backwards: the device restarted, nothing was lost.
                self.stats.extra["seq_restarts"] = self.stats.extra.get("seq_restarts", 0) + 1
            elif lost:
                self._flush_run(events)
                self.stats.frames_lost += lost
                events.append(FramesLost(lost))
        self._last_seq = seq
        self._aligned = True
        self.stats.frames_ok += 1

    def _violation(self, events: list[Event], message: str) -> None:
        self._flush_run(events)
        self.stats.protocol_errors += 1
        events.append(ProtocolViolation(message))

    # --- payloads -----------------------------------------------------------

    def _dispatch(self, events: list[Event], frame_type: int, payload: memoryview) -> None:
        try:
            if frame_type == fr.FrameType.DATA:
                self._data(events, payload)
            elif frame_type == fr.FrameType.INFO:
                self._new_info(events, fr.unpack_info(payload))
            elif frame_type == fr.FrameType.STATUS:
                self._other(events, StatusReceived(fr.unpack_status(payload)))
            elif frame_type == fr.FrameType.ACK:
                self._other(events, AckReceived(fr.unpack_ack(payload)))
            elif frame_type == fr.FrameType.COMMAND:
                self._command(events, payload)
            else:
                self._violation(events, f"frame type {frame_type:#04x} is unknown; skipped")
        except fr.ProtocolError as exc:
            self._violation(events, str(exc))

    def _other(self, events: list[Event], event: Event) -> None:
        self._flush_run(events)
        events.append(event)

    def _new_info(self, events: list[Event], info: fr.DeviceInfo) -> None:
        if info == self._info:
            return
        self._flush_run(events)
        self._info = info
        self._scale = np.asarray(info.volts_per_code(), dtype=np.float64)
        self._warned_no_info = False
        events.append(DeviceInfoReceived(info))

    def _command(self, events: list[Event], payload: memoryview) -> None:
        try:
            command = fr.unpack_command(payload)
        except fr.ProtocolError as exc:
            opcode = payload[0] if len(payload) >= 1 else 0
            tag = int.from_bytes(payload[2:4], "little") if len(payload) >= 4 else 0
            known = opcode in {o.value for o in fr.Opcode}
            result = fr.AckResult.BAD_ARGUMENT if known else fr.AckResult.UNKNOWN_COMMAND
            self._flush_run(events)
            self.stats.protocol_errors += 1
            events.append(BadCommand(str(exc), opcode, tag, int(result)))
            return
        self._other(events, CommandReceived(command))

    def _data(self, events: list[Event], payload: memoryview) -> None:
        info = self._info
        if info is None:
            self.stats.extra["data_without_info"] = self.stats.extra.get("data_without_info", 0) + 1
            if not self._warned_no_info:
                self._warned_no_info = True
                self._violation(
                    events, "DATA frames discarded until the device sends INFO (send IDENTIFY)"
                )
            return
        first, channels, fmt, count = fr.unpack_data_header(payload)
        if channels != info.channel_count or fmt != info.sample_format:
            raise fr.ProtocolError(
                f"DATA frame with {channels} channels, format {fmt} disagrees with INFO "
                f"({info.channel_count} channels, format {int(info.sample_format)}); discarded"
            )
        expected = fr.DATA_HEADER_SIZE + count * channels * info.sample_format.size
        if len(payload) != expected:
            raise fr.ProtocolError(
                f"DATA payload is {len(payload)} bytes; {count} sample frames need {expected}"
            )
        if count == 0:
            return
        self._check_index(events, first)
        if self._run and first != self._run_end:
            self._flush_run(events)
        if not self._run:
            self._run_first = first
        self._run.append(payload[fr.DATA_HEADER_SIZE :])
        self._run_end = first + count
        self._next_index = first + count

    def _check_index(self, events: list[Event], first: int) -> None:
        expected = self._next_index
        if expected is None or first == expected:
            return
        self._flush_run(events)
        if first > expected:
            self.stats.samples_lost += first - expected
            events.append(Gap(expected, first - expected))
        else:
            self.stats.index_resets += 1
            events.append(IndexReset(expected, first))

    def _flush_run(self, events: list[Event]) -> None:
        if not self._run:
            return
        info = self._info
        assert info is not None and self._scale is not None
        raw = b"".join(self._run)  # one copy; nothing keeps a view of the buffer
        codes = unpack_codes(raw, info.sample_format, info.channel_count)
        volts = codes_to_volts(codes, self._scale)
        self.stats.samples += volts.shape[1]
        events.append(SampleBlock(self._run_first, volts))
        self._run.clear()
