"""What a decoder yields: sample blocks and link events.

Every decoder (binary frames, text lines, any future input format) turns a
byte stream into a list of these plain values. Nothing here knows about hits.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .frames import Ack, Command, DeviceInfo, Status


@dataclass(frozen=True, slots=True, eq=False)
class SampleBlock:
    """Consecutive samples of every channel.

    first_index: index of the first sample frame (counted from 0 at START).
    volts: float64 array (channels, n), in volts at the device's input.
    """

    first_index: int
    volts: np.ndarray

    @property
    def count(self) -> int:
        return int(self.volts.shape[1])

    @property
    def end_index(self) -> int:
        """Index one past the last sample frame of this block."""
        return self.first_index + self.count


@dataclass(frozen=True, slots=True)
class DeviceInfoReceived:
    """An INFO frame (or, for text input, the format announced by comments and config)."""

    info: DeviceInfo


@dataclass(frozen=True, slots=True)
class Gap:
    """Samples that never arrived: first_index..first_index+count-1 are missing."""

    first_index: int
    count: int


@dataclass(frozen=True, slots=True)
class IndexReset:
    """The sample index went backwards (the device restarted its stream)."""

    previous_end: int
    first_index: int


@dataclass(frozen=True, slots=True)
class FramesLost:
    """The frame counter jumped: `count` frames (corrupted ones among them) never decoded."""

    count: int


@dataclass(frozen=True, slots=True)
class CrcError:
    """A frame failed its check. kind: "header" or "frame"."""

    kind: str


@dataclass(frozen=True, slots=True)
class Resync:
    """`skipped` bytes were passed over while looking for the next frame."""

    skipped: int


@dataclass(frozen=True, slots=True)
class StatusReceived:
    status: Status


@dataclass(frozen=True, slots=True)
class AckReceived:
    ack: Ack


@dataclass(frozen=True, slots=True)
class CommandReceived:
    """A host command (seen by a device-side decoder, e.g. the simulated test piece)."""

    command: Command


@dataclass(frozen=True, slots=True)
class ProtocolViolation:
    """An intact frame or line that says something this host refuses; `message` says what."""

    message: str


@dataclass(frozen=True, slots=True)
class BadCommand:
    """A COMMAND frame a device must refuse; carries what its ACK echoes.

    result is an AckResult value (UNKNOWN_COMMAND or BAD_ARGUMENT).
    """

    message: str
    opcode: int
    tag: int
    result: int


@dataclass(frozen=True, slots=True)
class MalformedLine:
    """Text input: a line that could not be read. line_number counts from 1."""

    line_number: int
    reason: str


Event = (
    SampleBlock
    | DeviceInfoReceived
    | Gap
    | IndexReset
    | FramesLost
    | CrcError
    | Resync
    | StatusReceived
    | AckReceived
    | CommandReceived
    | BadCommand
    | ProtocolViolation
    | MalformedLine
)


@dataclass(slots=True)
class LinkStats:
    """Running counters of one decoder, for health displays and tests."""

    bytes_in: int = 0
    frames_ok: int = 0
    samples: int = 0
    header_crc_errors: int = 0
    frame_crc_errors: int = 0
    resyncs: int = 0
    bytes_skipped: int = 0
    frames_lost: int = 0
    samples_lost: int = 0
    protocol_errors: int = 0
    malformed_lines: int = 0
    index_resets: int = 0
    extra: dict[str, int] = field(default_factory=dict)

    @property
    def crc_errors(self) -> int:
        return self.header_crc_errors + self.frame_crc_errors
