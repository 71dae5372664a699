"""Binary decode throughput on a 64 MB stream of 4-channel int24 DATA frames.

Printed beside, from the same run: numpy.frombuffer on the same payload bytes
(materialised, 64 KiB at a time: the memory-bandwidth ceiling of any decoder),
the bare int24-to-volts
conversion of those bytes in one call (the numpy work alone, without framing),
and the USB 2.0 full-speed CDC link of about 1 MB/s (common practice figure).
Goal: at least 50 MB/s on one core, 50 times the link.

Run: python tests/bench/bench_decode.py [--mb 64]
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from table import Figure, Row, pick, show

from taprig.firmware_protocol import (
    BinaryDecoder,
    ChannelInfo,
    DeviceInfo,
    FrameEncoder,
    SampleBlock,
    SampleFormat,
    max_frames_per_data,
)
from taprig.firmware_protocol.samples import codes_to_volts, unpack_codes

LINK_MB_S = 1.0  # USB 2.0 full-speed CDC, about 1 MB/s in practice (common practice)
GOAL_MB_S = 50.0
CHUNK = 65536  # bytes per read, what a serial read of a busy port returns


def make_stream(megabytes: float, per_frame: int) -> tuple[bytes, bytes]:
    """(framed stream, concatenated payload sample bytes) of about `megabytes` MB."""
    info = DeviceInfo(1, SampleFormat.INT24, 51_200_000, "BENCH", "1", (ChannelInfo(5.0, 24),) * 4)
    enc = FrameEncoder()
    rng = np.random.default_rng(7)
    frame_bytes = per_frame * 12 + 26
    n_frames = int(megabytes * 1e6 / frame_bytes)
    codes = rng.integers(-(1 << 23), 1 << 23, size=(per_frame * 64, 4))
    parts = [enc.info(info)]
    for i in range(n_frames):
        j = (i % 64) * per_frame
        parts.append(enc.data(i * per_frame, codes[j : j + per_frame], SampleFormat.INT24))
    payload = b"".join(p[22:-4] for p in parts[1:])
    return b"".join(parts), payload


def decode_rate(stream: bytes) -> tuple[float, int]:
    """MB/s of BinaryDecoder over `stream` fed in CHUNK pieces, and sample frames decoded."""
    dec = BinaryDecoder()
    view = memoryview(stream)
    samples = 0
    t0 = time.perf_counter()
    for i in range(0, len(stream), CHUNK):
        for ev in dec.feed(view[i : i + CHUNK]):
            if isinstance(ev, SampleBlock):
                samples += ev.count
    dt = time.perf_counter() - t0
    assert dec.stats.crc_errors == 0
    return len(stream) / dt / 1e6, samples


def run(megabytes: float = 64.0) -> list[Row]:
    rows: list[Row] = []
    for per_frame in (max_frames_per_data(4, SampleFormat.INT24), 256):
        stream, payload = make_stream(megabytes, per_frame)
        rate, samples = decode_rate(stream)
        rows.append(
            (
                f"binary decode, {per_frame} sample frames/frame",
                rate,
                "MB/s",
                f"goal >= {GOAL_MB_S:g} MB/s ({rate / LINK_MB_S:.0f}x the {LINK_MB_S:g} MB/s "
                f"USB FS link); {samples / (len(stream) / rate / 1e6) / 1e6:.1f} M sample frames/s",
            )
        )
    view = memoryview(payload)
    step = CHUNK - CHUNK % 12  # whole sample frames per piece
    t0 = time.perf_counter()
    for i in range(0, len(payload), step):
        np.frombuffer(view[i : i + step], dtype=np.uint8).copy()
    copy_rate = len(payload) / (time.perf_counter() - t0) / 1e6
    rows.append(
        ("ceiling: np.frombuffer+copy of payload", copy_rate, "MB/s", "same bytes, 64 KiB pieces")
    )
    scale = [5.0 / (1 << 23)] * 4
    t0 = time.perf_counter()
    for i in range(0, len(payload), step):
        codes_to_volts(unpack_codes(view[i : i + step], SampleFormat.INT24, 4), scale)
    conv = len(payload) / (time.perf_counter() - t0) / 1e6
    rows.append(("int24 -> volts alone (no framing)", conv, "MB/s", "same pieces"))
    return rows


def headline(rows: list[Row]) -> list[Figure]:
    return [Figure("decode, binary int24, largest frames", rows[0][1], "MB/s", ">=", GOAL_MB_S,
                   pick(rows, "ceiling:"), "memory copy of the payload")]  # fmt: skip


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--mb", type=float, default=64.0)
    show(run(parser.parse_args().mb))
