"""Binary frame codec: CRCs, round trips, resynchronisation and bad input."""

from __future__ import annotations

import zlib

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from taprig.firmware_protocol import (
    BinaryDecoder,
    ChannelInfo,
    Command,
    CommandReceived,
    DeviceInfo,
    DeviceInfoReceived,
    FrameEncoder,
    FramesLost,
    Gap,
    Opcode,
    ProtocolViolation,
    SampleBlock,
    SampleFormat,
    Status,
    StatusReceived,
    max_frames_per_data,
)
from taprig.firmware_protocol import frames as fr
from taprig.firmware_protocol.crc import crc16_xmodem, crc32

FULL_SCALE = 5.0


def make_info(
    fmt: SampleFormat = SampleFormat.INT24, channels: int = 4, bits: int = 24
) -> DeviceInfo:
    return DeviceInfo(
        protocol_version=1,
        sample_format=fmt,
        rate_milli_hz=51_200_000,
        device_id="TEST-01",
        firmware="0.0.1",
        channels=tuple(ChannelInfo(FULL_SCALE, bits) for _ in range(channels)),
    )


def make_stream(
    n_frames: int, per_frame: int = 50, fmt: SampleFormat = SampleFormat.INT24, seed: int = 0
) -> tuple[list[bytes], np.ndarray, DeviceInfo]:
    """An INFO frame then n_frames DATA frames of random codes; returns frames and codes (n, 4)."""
    bits = {SampleFormat.INT16: 16, SampleFormat.INT24: 24, SampleFormat.INT32: 32}.get(fmt, 24)
    info = make_info(fmt, bits=bits)
    rng = np.random.default_rng(seed)
    lo, hi = -(1 << (bits - 1)), (1 << (bits - 1))
    codes = rng.integers(lo, hi, size=(n_frames * per_frame, 4), dtype=np.int64)
    enc = FrameEncoder()
    out = [enc.info(info)]
    for i in range(n_frames):
        out.append(enc.data(i * per_frame, codes[i * per_frame : (i + 1) * per_frame], fmt))
    return out, codes, info


def decode_all(decoder: BinaryDecoder, chunks: list[bytes]) -> list[object]:
    events: list[object] = []
    for c in chunks:
        events.extend(decoder.feed(c))
    return events


def blocks_of(events: list[object]) -> list[SampleBlock]:
    return [e for e in events if isinstance(e, SampleBlock)]


def test_crc_check_values() -> None:
    """Check values for ASCII "123456789": CRC-32/ISO-HDLC 0xCBF43926 and CRC-16/XMODEM 0x31C3.

    Source: Greg Cook, "Catalogue of parametrised CRC algorithms" (reveng), entries
    CRC-32/ISO-HDLC and CRC-16/XMODEM.
    """
    assert crc32(b"123456789") == 0xCBF43926
    assert crc16_xmodem(b"123456789") == 0x31C3


@given(st.binary(max_size=4096))
def test_crc32_agrees_with_zlib(data: bytes) -> None:
    """Agreement with zlib.crc32 (the reference implementation of CRC-32/ISO-HDLC)."""
    assert crc32(data) == zlib.crc32(data)


@pytest.mark.parametrize("fmt", list(SampleFormat))
def test_round_trip_every_format(fmt: SampleFormat) -> None:
    """Volts = code × full_scale / 2^(bits−1) (PROTOCOL.md §3), exactly, for every format."""
    frames, codes, info = make_stream(5, fmt=fmt)
    if fmt is SampleFormat.FLOAT32:
        values = (codes / float(1 << 23)).astype(np.float32)
        enc = FrameEncoder()
        frames = [enc.info(info)] + [
            enc.data(i * 50, values[i * 50 : (i + 1) * 50], fmt) for i in range(5)
        ]
        expected = values.astype(np.float64).T
    else:
        bits = info.channels[0].adc_bits
        expected = codes.T * (FULL_SCALE / float(1 << (bits - 1)))
    d = BinaryDecoder()
    blocks = blocks_of(decode_all(d, [b"".join(frames)]))
    assert len(blocks) == 1
    assert blocks[0].first_index == 0
    np.testing.assert_array_equal(blocks[0].volts, expected)
    assert d.stats.frames_ok == 6
    assert d.stats.crc_errors == 0


def test_int24_extremes_sign_extend() -> None:
    """Two's-complement 24-bit limits −2^23 and 2^23−1 survive packing."""
    info = make_info()
    codes = np.array([[-(1 << 23), (1 << 23) - 1, -1, 0]])
    enc = FrameEncoder()
    stream = enc.info(info) + enc.data(0, codes, SampleFormat.INT24)
    (block,) = blocks_of(decode_all(BinaryDecoder(), [stream]))
    np.testing.assert_array_equal(block.volts[:, 0], codes[0] * FULL_SCALE / (1 << 23))


def test_frame_capacity_limit() -> None:
    """(8192 − 12) / (4 × 3) = 681 sample frames of 4-channel int24 fit a frame (PROTOCOL.md §3)."""
    assert max_frames_per_data(4, SampleFormat.INT24) == 681
    enc = FrameEncoder()
    enc.data(0, np.zeros((681, 4), dtype=np.int32), SampleFormat.INT24)
    with pytest.raises(ValueError, match="exceeds the limit"):
        enc.data(0, np.zeros((682, 4), dtype=np.int32), SampleFormat.INT24)


def test_gap_from_sample_index() -> None:
    """A jump in first_sample is reported as a gap of exactly the samples lost."""
    frames, _codes, _info = make_stream(6, per_frame=50)
    stream = frames[:3] + frames[4:]  # drop the third DATA frame (samples 100..149)
    events = decode_all(BinaryDecoder(), [b"".join(stream)])
    gaps = [e for e in events if isinstance(e, Gap)]
    assert gaps == [Gap(100, 50)]
    assert [e for e in events if isinstance(e, FramesLost)] == [FramesLost(1)]
    starts = [b.first_index for b in blocks_of(events)]
    assert starts == [0, 150]


def test_half_frame_at_connect_then_lock() -> None:
    """Starting mid-frame, the decoder skips to the first intact frame."""
    frames, codes, _ = make_stream(4)
    tail = frames[1][len(frames[1]) // 2 :]
    events = decode_all(BinaryDecoder(), [frames[0], tail, *frames[2:]])
    blocks = blocks_of(events)
    assert blocks[0].first_index == 50
    volts = np.concatenate([b.volts for b in blocks], axis=1)
    np.testing.assert_array_equal(volts, codes[50:200].T * FULL_SCALE / (1 << 23))


def test_data_before_info_is_discarded_with_one_message() -> None:
    frames, _codes, _ = make_stream(3)
    d = BinaryDecoder()
    events = decode_all(d, [b"".join(frames[1:])])
    assert not blocks_of(events)
    violations = [e for e in events if isinstance(e, ProtocolViolation)]
    assert len(violations) == 1 and "INFO" in violations[0].message
    events = decode_all(d, [frames[0]])
    assert isinstance(events[0], DeviceInfoReceived)


def test_status_and_commands_decode() -> None:
    enc = FrameEncoder()
    status = Status(sample_index=12345, overload_mask=0b0110, streaming=True, overruns=2)
    cmd = Command(Opcode.SET_RATE, tag=7, argument=25_600_000)
    events = decode_all(BinaryDecoder(), [enc.status(status) + enc.command(cmd)])
    assert events == [StatusReceived(status), CommandReceived(cmd)]
    assert status.overloaded_channels() == (1, 2)


def _info_frame_raw(payload: bytes) -> bytes:
    return fr.frame(int(fr.FrameType.INFO), 0, payload)


@pytest.mark.parametrize(
    ("mutate", "needle"),
    [
        (lambda p: p[:2] + bytes([9]) + p[3:], "sample_format = 9"),
        (lambda p: p[:4] + (2_000_000_000).to_bytes(4, "little") + p[8:], "rate_milli_hz"),
        (lambda p: p[:4] + (0).to_bytes(4, "little") + p[8:], "1 Hz to 1 MHz"),
        (lambda p: p[:1] + bytes([40]) + p[2:], "channels = 40"),
        (lambda p: p[:-8], "payload is"),
    ],
)
def test_bad_info_names_the_field(mutate: object, needle: str) -> None:
    """Unknown sample format, absurd sample rate, too many channels: a message, no crash."""
    payload = fr.pack_info(make_info())
    bad = mutate(payload)  # type: ignore[operator]
    d = BinaryDecoder()
    events = d.feed(_info_frame_raw(bad))
    assert [type(e) for e in events] == [ProtocolViolation]
    assert needle in events[0].message  # type: ignore[union-attr]
    assert d.info is None


def test_wrong_protocol_version_is_reported_and_skipped() -> None:
    frames, _codes, info = make_stream(2)
    future = fr.frame(int(fr.FrameType.INFO), 3, fr.pack_info(info), version=2)
    d = BinaryDecoder()
    events = d.feed(frames[0] + future + frames[1])
    msgs = [e.message for e in events if isinstance(e, ProtocolViolation)]
    assert msgs == ["frame of protocol version 2 skipped; this host speaks version 1"]
    assert blocks_of(events)


@settings(max_examples=40, deadline=None)
@given(st.binary(min_size=0, max_size=20000))
def test_garbage_never_raises(garbage: bytes) -> None:
    d = BinaryDecoder()
    for i in range(0, len(garbage), 997):
        d.feed(garbage[i : i + 997])
    assert d.stats.bytes_in == len(garbage)


@settings(max_examples=60, deadline=None)
@given(
    seed=st.integers(0, 2**32 - 1),
    n_corrupt=st.integers(0, 6),
    n_dropped=st.integers(0, 4),
    cuts=st.lists(st.integers(1, 3000), min_size=0, max_size=30),
    mode=st.sampled_from(["flip", "drop"]),
)
def test_corruption_resync_property(
    seed: int, n_corrupt: int, n_dropped: int, cuts: list[int], mode: str
) -> None:
    """Any chunking, random corruption and dropped bytes: no exception, resync every time,
    every damaged frame counted (as lost via the frame counter), and every intact frame's
    samples decoded exactly at their own indexes."""
    frames, codes, _ = make_stream(24, per_frame=40, seed=seed % 1000)
    rng = np.random.default_rng(seed)
    damaged = set(rng.choice(np.arange(1, 24), size=n_corrupt + n_dropped, replace=False).tolist())
    # frames[0] is INFO; DATA k is frames[k+1]; never damage the last frame so loss is visible
    stream = []
    for k, f in enumerate(frames):
        if k in damaged:
            b = bytearray(f)
            where = int(rng.integers(0, len(b)))
            if mode == "flip":
                b[where] ^= int(rng.integers(1, 256))
            else:
                del b[where]
            f = bytes(b)
        stream.append(f)
    data = b"".join(stream)
    chunks, pos = [], 0
    for c in cuts:
        chunks.append(data[pos : pos + c])
        pos += c
    chunks.append(data[pos:])
    d = BinaryDecoder()
    events = decode_all(d, chunks)
    got = {}
    for b in blocks_of(events):
        for j in range(b.count):
            got[b.first_index + j] = b.volts[:, j]
    expected_indexes = {
        (k - 1) * 40 + j for k in range(1, 25) if k not in damaged for j in range(40)
    }
    assert set(got) == expected_indexes
    for i in expected_indexes:
        np.testing.assert_array_equal(got[i], codes[i] * FULL_SCALE / (1 << 23))
    assert d.stats.frames_lost == len(damaged)
    assert d.stats.frames_ok == 25 - len(damaged)
    assert d.stats.crc_errors <= len(damaged)
    first, last = min(got), max(got)
    missing = sum(1 for i in range(first, last + 1) if i not in got)
    assert sum(e.count for e in events if isinstance(e, Gap)) == missing
    assert all(not isinstance(e, ProtocolViolation) for e in events)
