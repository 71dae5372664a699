"""The device link: bytes between a measuring device and the host, nothing about hits.

Public surface: the decoders (picked by name with `make_decoder`), the frame
encoder, the payload dataclasses and the events decoders yield. The wire
format is specified in PROTOCOL.md beside this file.
"""

from .binary import BinaryDecoder
from .encoder import FrameEncoder, max_frames_per_data
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
    MalformedLine,
    ProtocolViolation,
    Resync,
    SampleBlock,
    StatusReceived,
)
from .formats import DECODERS, Decoder, make_decoder
from .frames import (
    PROTOCOL_VERSION,
    Ack,
    AckResult,
    ChannelInfo,
    Command,
    DeviceInfo,
    FrameType,
    Opcode,
    ProtocolError,
    SampleFormat,
    Status,
)

__all__ = [
    "DECODERS",
    "PROTOCOL_VERSION",
    "Ack",
    "AckReceived",
    "AckResult",
    "BadCommand",
    "BinaryDecoder",
    "ChannelInfo",
    "Command",
    "CommandReceived",
    "CrcError",
    "Decoder",
    "DeviceInfo",
    "DeviceInfoReceived",
    "Event",
    "FrameEncoder",
    "FrameType",
    "FramesLost",
    "Gap",
    "IndexReset",
    "LinkStats",
    "MalformedLine",
    "Opcode",
    "ProtocolError",
    "ProtocolViolation",
    "Resync",
    "SampleBlock",
    "SampleFormat",
    "Status",
    "StatusReceived",
    "make_decoder",
    "max_frames_per_data",
]
