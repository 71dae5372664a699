"""The example frames in PROTOCOL.md are exactly what the encoder produces.

Run this file as a script to rewrite the examples section after a deliberate change:
    python tests/firmware_protocol/test_protocol_doc.py
"""

from __future__ import annotations

import re
from pathlib import Path

from taprig.firmware_protocol import (
    Ack,
    AckResult,
    BinaryDecoder,
    ChannelInfo,
    Command,
    DeviceInfo,
    FrameEncoder,
    Opcode,
    SampleFormat,
    Status,
)

DOC = Path(__file__).resolve().parents[2] / "firmware_protocol" / "PROTOCOL.md"
BEGIN, END = "<!-- examples:begin -->", "<!-- examples:end -->"


def _hex(frame: bytes) -> str:
    lines = [frame[i : i + 16].hex(" ") for i in range(0, len(frame), 16)]
    return "\n".join(lines)


def examples() -> list[tuple[str, bytes]]:
    """(caption, frame) pairs, one device session in order."""
    dev = FrameEncoder()
    host = FrameEncoder()
    info = DeviceInfo(
        protocol_version=1,
        sample_format=SampleFormat.INT24,
        rate_milli_hz=51_200_000,
        device_id="PANEL-RIG-2",
        firmware="1.4.0",
        channels=(ChannelInfo(5.0, 24), ChannelInfo(5.0, 24)),
    )
    return [
        (
            "Host → device, COMMAND START, seq 0, tag 0x0101",
            host.command(Command(Opcode.START, 0x0101)),
        ),
        (
            "Device → host, ACK of START (result 0 ok), seq 0",
            dev.ack(Ack(Opcode.START, AckResult.OK, 0x0101)),
        ),
        (
            "Device → host, INFO: 2 channels, int24, 51 200 Hz, ±5 V, 24 bits, seq 1",
            dev.info(info),
        ),
        (
            "Device → host, DATA: first_sample 0, 2 sample frames, "
            "codes (1, −1), (8388607, −8388608)",
            dev.data(0, [[1, -1], [8388607, -8388608]], SampleFormat.INT24),
        ),
        (
            "Device → host, STATUS: next sample 2, channel 1 overloaded, streaming, 0 overruns",
            dev.status(Status(sample_index=2, overload_mask=0b10, streaming=True, overruns=0)),
        ),
        (
            "Host → device, COMMAND PING nonce 0x12345678, tag 0x0102, seq 1",
            host.command(Command(Opcode.PING, 0x0102, 0x12345678)),
        ),
    ]


def render() -> str:
    parts = []
    for caption, frame in examples():
        parts.append(f"{caption} ({len(frame)} bytes):\n\n```\n{_hex(frame)}\n```\n")
    return "\n".join(parts)


def _section(text: str) -> str:
    m = re.search(re.escape(BEGIN) + r"\n(.*)" + re.escape(END), text, re.S)
    assert m, "PROTOCOL.md lost its example markers"
    return m.group(1)


def test_doc_examples_match_encoder() -> None:
    assert _section(DOC.read_text(encoding="utf-8")) == render()


def test_doc_examples_decode() -> None:
    """The examples, concatenated, decode without a single error."""
    device_side = b"".join(f for c, f in examples() if c.startswith("Device"))
    d = BinaryDecoder()
    events = d.feed(device_side)
    assert d.stats.crc_errors == 0 and d.stats.protocol_errors == 0
    assert len(events) == 4  # ack, info, block, status


if __name__ == "__main__":
    text = DOC.read_text(encoding="utf-8")
    new = (
        text.replace(_section(text), render())
        if _section(text)
        else text.replace(BEGIN + "\n", BEGIN + "\n" + render())
    )
    DOC.write_text(new, encoding="utf-8")
    print(f"rewrote examples in {DOC}")
