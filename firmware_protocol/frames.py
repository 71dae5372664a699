"""Frame envelope, frame types and payload layouts of the device link protocol.

The byte layouts here are the ones written in PROTOCOL.md; that file is the
specification and this module implements it in Python. Payloads are
packed and unpacked with `struct`; sample arrays live in `samples.py`.
"""

from __future__ import annotations

import enum
import struct
from dataclasses import dataclass

from .crc import crc16_xmodem, crc32

PROTOCOL_VERSION = 1
MAGIC = b"\xe7\x19"
HEADER_SIZE = 10
TRAILER_SIZE = 4
OVERHEAD = HEADER_SIZE + TRAILER_SIZE
MAX_PAYLOAD = 8192
MAX_CHANNELS = 16
MIN_RATE_MILLI_HZ = 1_000  # 1 Hz
MAX_RATE_MILLI_HZ = 1_000_000_000  # 1 MHz
INFO_FIXED_SIZE = 40
INFO_CHANNEL_SIZE = 8
DATA_HEADER_SIZE = 12
STATUS_SIZE = 16
ACK_SIZE = 8

_HEADER = struct.Struct("<2sBBHH")  # magic, version, type, seq, length
_HCHECK = struct.Struct("<H")
_CRC = struct.Struct("<I")
_INFO = struct.Struct("<BBBBI16s16s")
_INFO_CHANNEL = struct.Struct("<fB3x")
_DATA = struct.Struct("<QBBH")
_STATUS = struct.Struct("<QHBxI")
_COMMAND = struct.Struct("<BxH")
_COMMAND_ARG = struct.Struct("<BxHI")
_ACK = struct.Struct("<BBHI")
_F32 = struct.Struct("<f")


class FrameType(enum.IntEnum):
    """The `type` byte of the envelope."""

    INFO = 0x01
    DATA = 0x02
    STATUS = 0x03
    ACK = 0x04
    COMMAND = 0x81


class SampleFormat(enum.IntEnum):
    """How one sample is laid out in a DATA frame."""

    INT16 = 1
    INT24 = 2
    INT32 = 3
    FLOAT32 = 4

    @property
    def size(self) -> int:
        """Bytes per sample."""
        return _FORMAT_SIZES[self]

    @property
    def container_bits(self) -> int:
        """Bits of the integer container (24 for float32's mantissa)."""
        return 24 if self is SampleFormat.FLOAT32 else 8 * self.size


_FORMAT_SIZES = {
    SampleFormat.INT16: 2,
    SampleFormat.INT24: 3,
    SampleFormat.INT32: 4,
    SampleFormat.FLOAT32: 4,
}


class Opcode(enum.IntEnum):
    """Host-to-device command codes."""

    START = 0x01
    STOP = 0x02
    SET_RATE = 0x03
    PING = 0x04
    IDENTIFY = 0x05


OPCODES_WITH_ARGUMENT = frozenset({Opcode.SET_RATE, Opcode.PING})


class AckResult(enum.IntEnum):
    """The `result` byte of an ACK."""

    OK = 0
    UNKNOWN_COMMAND = 1
    BAD_ARGUMENT = 2
    BUSY = 3


class ProtocolError(ValueError):
    """A frame that is intact on the wire but says something this host refuses.

    The message names the field, the value seen and what is allowed.
    """


@dataclass(frozen=True, slots=True)
class ChannelInfo:
    """One channel as the device describes it."""

    full_scale_v: float
    """Volts at the positive full-scale code."""
    adc_bits: int
    """Converter resolution, 1..32."""


@dataclass(frozen=True, slots=True)
class DeviceInfo:
    """The contents of an INFO frame."""

    protocol_version: int
    sample_format: SampleFormat
    rate_milli_hz: int
    device_id: str
    firmware: str
    channels: tuple[ChannelInfo, ...]

    @property
    def channel_count(self) -> int:
        return len(self.channels)

    @property
    def rate_hz(self) -> float:
        """Sample rate in Hz."""
        return self.rate_milli_hz / 1000.0

    def volts_per_code(self) -> tuple[float, ...]:
        """Per channel, volts per sample code (1.0 for float32 samples, already volts)."""
        if self.sample_format is SampleFormat.FLOAT32:
            return tuple(1.0 for _ in self.channels)
        return tuple(c.full_scale_v / float(1 << (c.adc_bits - 1)) for c in self.channels)


@dataclass(frozen=True, slots=True)
class Status:
    """The contents of a STATUS frame."""

    sample_index: int
    overload_mask: int
    streaming: bool
    overruns: int

    def overloaded_channels(self) -> tuple[int, ...]:
        return tuple(c for c in range(MAX_CHANNELS) if self.overload_mask >> c & 1)


@dataclass(frozen=True, slots=True)
class Command:
    """A host-to-device request."""

    opcode: Opcode
    tag: int
    argument: int = 0


@dataclass(frozen=True, slots=True)
class Ack:
    """A device's reply to one command."""

    opcode: int
    result: AckResult
    tag: int
    value: int = 0


# --- envelope ---------------------------------------------------------------


def frame(frame_type: int, seq: int, payload: bytes, version: int = PROTOCOL_VERSION) -> bytes:
    """Wrap a payload in the envelope: header, header check, payload, CRC-32."""
    if len(payload) > MAX_PAYLOAD:
        raise ValueError(f"payload of {len(payload)} bytes exceeds the limit of {MAX_PAYLOAD}")
    head = _HEADER.pack(MAGIC, version, frame_type, seq & 0xFFFF, len(payload))
    head += _HCHECK.pack(crc16_xmodem(head))
    body = head + payload
    return body + _CRC.pack(crc32(body))


def parse_header(buf: bytes | bytearray | memoryview, pos: int) -> tuple[int, int, int, int] | None:
    """(version, type, seq, length) of the header at `pos`, or None if the check fails.

    The caller guarantees HEADER_SIZE bytes are available at `pos`.
    """
    head = bytes(buf[pos : pos + 8])
    (check,) = _HCHECK.unpack_from(buf, pos + 8)
    if crc16_xmodem(head) != check:
        return None
    _magic, version, frame_type, seq, length = _HEADER.unpack(head)
    if length > MAX_PAYLOAD:
        return None
    return version, frame_type, seq, length


def frame_crc_ok(buf: bytes | bytearray | memoryview, pos: int, length: int) -> bool:
    """True if the CRC-32 of the frame at `pos` with payload `length` matches."""
    end = pos + HEADER_SIZE + length
    (crc,) = _CRC.unpack_from(buf, end)
    return crc32(memoryview(buf)[pos:end]) == int(crc)


# --- payloads ---------------------------------------------------------------


def _ascii_field(text: str, name: str) -> bytes:
    raw = text.encode("ascii")
    if len(raw) > 16:
        raise ValueError(f"{name} {text!r} is longer than 16 ASCII characters")
    return raw


def pack_info(info: DeviceInfo) -> bytes:
    """INFO payload."""
    validate_info(info)
    out = _INFO.pack(
        info.protocol_version,
        info.channel_count,
        int(info.sample_format),
        0,
        info.rate_milli_hz,
        _ascii_field(info.device_id, "device_id"),
        _ascii_field(info.firmware, "firmware"),
    )
    return out + b"".join(_INFO_CHANNEL.pack(c.full_scale_v, c.adc_bits) for c in info.channels)


def unpack_info(payload: bytes | memoryview) -> DeviceInfo:
    """Parse and validate an INFO payload; raise ProtocolError naming the bad field."""
    if len(payload) < INFO_FIXED_SIZE:
        raise ProtocolError(
            f"INFO payload of {len(payload)} bytes is shorter than the fixed {INFO_FIXED_SIZE}"
        )
    version, count, fmt, _flags, rate, dev, fw = _INFO.unpack_from(payload, 0)
    if not 1 <= count <= MAX_CHANNELS:
        raise ProtocolError(f"INFO channels = {count}; allowed 1..{MAX_CHANNELS}")
    expected = INFO_FIXED_SIZE + INFO_CHANNEL_SIZE * count
    if len(payload) != expected:
        raise ProtocolError(
            f"INFO payload is {len(payload)} bytes; {count} channels need {expected}"
        )
    try:
        sample_format = SampleFormat(fmt)
    except ValueError:
        allowed = ", ".join(f"{f.value} ({f.name.lower()})" for f in SampleFormat)
        raise ProtocolError(f"INFO sample_format = {fmt}; allowed {allowed}") from None
    channels = tuple(
        ChannelInfo(float(fs), int(bits))
        for fs, bits in _INFO_CHANNEL.iter_unpack(
            bytes(payload[INFO_FIXED_SIZE : INFO_FIXED_SIZE + INFO_CHANNEL_SIZE * count])
        )
    )
    info = DeviceInfo(
        protocol_version=version,
        sample_format=sample_format,
        rate_milli_hz=rate,
        device_id=_decode_ascii(dev),
        firmware=_decode_ascii(fw),
        channels=channels,
    )
    validate_info(info)
    return info


def _decode_ascii(raw: bytes) -> str:
    return raw.rstrip(b"\x00").decode("ascii", errors="replace")


def validate_info(info: DeviceInfo) -> None:
    """Raise ProtocolError if any field of `info` is outside the protocol's limits."""
    if not MIN_RATE_MILLI_HZ <= info.rate_milli_hz <= MAX_RATE_MILLI_HZ:
        raise ProtocolError(
            f"INFO rate_milli_hz = {info.rate_milli_hz} ({info.rate_milli_hz / 1000:g} Hz); "
            f"allowed {MIN_RATE_MILLI_HZ}..{MAX_RATE_MILLI_HZ} (1 Hz to 1 MHz)"
        )
    if not 1 <= info.channel_count <= MAX_CHANNELS:
        raise ProtocolError(f"INFO channels = {info.channel_count}; allowed 1..{MAX_CHANNELS}")
    bits_limit = info.sample_format.container_bits
    for c, ch in enumerate(info.channels):
        as_f32 = _F32.unpack(_F32.pack(ch.full_scale_v))[0] if abs(ch.full_scale_v) < 3e38 else 0.0
        if not (as_f32 > 0.0 and as_f32 < float("inf")):
            raise ProtocolError(
                f"INFO channel {c} full_scale_v = {ch.full_scale_v}; allowed a finite value > 0"
            )
        if not 1 <= ch.adc_bits <= bits_limit:
            raise ProtocolError(
                f"INFO channel {c} adc_bits = {ch.adc_bits}; allowed 1..{bits_limit} "
                f"for {info.sample_format.name.lower()}"
            )


def pack_data_header(first_sample: int, channels: int, fmt: SampleFormat, count: int) -> bytes:
    """The 12-byte head of a DATA payload."""
    return _DATA.pack(first_sample, channels, int(fmt), count)


def unpack_data_header(payload: bytes | memoryview) -> tuple[int, int, int, int]:
    """(first_sample, channels, format, count) of a DATA payload."""
    if len(payload) < DATA_HEADER_SIZE:
        raise ProtocolError(f"DATA payload of {len(payload)} bytes is shorter than its head")
    first, channels, fmt, count = _DATA.unpack_from(payload, 0)
    return int(first), int(channels), int(fmt), int(count)


def pack_status(status: Status) -> bytes:
    return _STATUS.pack(
        status.sample_index, status.overload_mask, int(status.streaming), status.overruns
    )


def unpack_status(payload: bytes | memoryview) -> Status:
    if len(payload) != STATUS_SIZE:
        raise ProtocolError(f"STATUS payload is {len(payload)} bytes; expected {STATUS_SIZE}")
    index, mask, state, overruns = _STATUS.unpack_from(payload, 0)
    return Status(int(index), int(mask), bool(state), int(overruns))


def pack_command(command: Command) -> bytes:
    if command.opcode in OPCODES_WITH_ARGUMENT:
        return _COMMAND_ARG.pack(int(command.opcode), command.tag, command.argument)
    return _COMMAND.pack(int(command.opcode), command.tag)


def unpack_command(payload: bytes | memoryview) -> Command:
    """Parse a COMMAND payload; unknown opcodes raise ProtocolError (answer UNKNOWN_COMMAND)."""
    if len(payload) not in (4, 8):
        raise ProtocolError(f"COMMAND payload is {len(payload)} bytes; expected 4 or 8")
    opcode_raw, tag = _COMMAND.unpack_from(payload, 0)
    try:
        opcode = Opcode(opcode_raw)
    except ValueError:
        raise ProtocolError(f"COMMAND opcode = {opcode_raw:#04x} is unknown") from None
    needs_arg = opcode in OPCODES_WITH_ARGUMENT
    if needs_arg != (len(payload) == 8):
        raise ProtocolError(
            f"COMMAND {opcode.name} payload is {len(payload)} bytes; "
            f"expected {8 if needs_arg else 4}"
        )
    argument = _CRC.unpack_from(payload, 4)[0] if needs_arg else 0
    return Command(opcode, int(tag), int(argument))


def pack_ack(ack: Ack) -> bytes:
    return _ACK.pack(ack.opcode, int(ack.result), ack.tag, ack.value)


def unpack_ack(payload: bytes | memoryview) -> Ack:
    if len(payload) != ACK_SIZE:
        raise ProtocolError(f"ACK payload is {len(payload)} bytes; expected {ACK_SIZE}")
    opcode, result, tag, value = _ACK.unpack_from(payload, 0)
    try:
        res = AckResult(result)
    except ValueError:
        raise ProtocolError(f"ACK result = {result} is unknown") from None
    return Ack(int(opcode), res, int(tag), int(value))
