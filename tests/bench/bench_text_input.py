"""Throughput of the plain-text line input decoder, beside its goal and a one-call ceiling.

Run as a script (`python tests/bench/bench_text_input.py`) to print the
figures, or import `run()` for the rows. The stream is 4 channels × 1e6
sample frames written by `format_lines` (6 decimals), fed in 64 KiB chunks
as a serial or TCP reader would deliver it. Throughput is in sample frames
per second (one frame = one value of every channel), the unit of
`LinkStats.samples`.

The ceiling is numpy parsing the same bytes in a single `np.fromstring`
call after turning commas into spaces: the decoder's own inner parser with
no line bookkeeping, no chunking and no events.
"""

from __future__ import annotations

import math
import time

import numpy as np
from table import Figure

from taprig.firmware_protocol.text import TextDecoder, format_lines, rate_comment

CHANNELS = 4
FRAMES = 1_000_000
CHUNK = 64 * 1024
GOAL = 1.0e6  # sample frames per second
REPEATS = 2  # best of, against scheduling noise
JUNK_EVERY = 2000  # lines, for the error-path figure (about one bad line per 64 KiB chunk)


def _decode(stream: bytes) -> tuple[float, TextDecoder]:
    """Seconds to decode `stream` fed in CHUNK-byte pieces, and the decoder used."""
    dec = TextDecoder(channels=CHANNELS)
    view = memoryview(stream)
    t0 = time.perf_counter()
    for pos in range(0, len(stream), CHUNK):
        dec.feed(view[pos : pos + CHUNK])
    return time.perf_counter() - t0, dec


def _with_junk(text: bytes) -> bytes:
    """`text` with a malformed line after every JUNK_EVERY lines."""
    lines = text.split(b"\n")
    for k in range(len(lines) - 1 - JUNK_EVERY, 0, -JUNK_EVERY):
        lines.insert(k, b"1.2.3,0,0,0")  # passes the character check, fails the parse
    return b"\n".join(lines)


def run() -> list[tuple[str, float, str, float]]:
    """(figure, value, unit, goal) rows; goal is NaN where there is none."""
    rng = np.random.default_rng(11)
    volts = rng.uniform(-10.0, 10.0, (CHANNELS, FRAMES))
    text = format_lines(volts, 6)
    stream = rate_comment(51200.0) + text
    junk = rate_comment(51200.0) + _with_junk(text)

    best = math.inf
    for _ in range(REPEATS):
        seconds, dec = _decode(stream)
        best = min(best, seconds)
        if dec.stats.samples != FRAMES or dec.stats.malformed_lines != 0:
            raise RuntimeError(f"decoder lost samples: {dec.stats}")

    best_junk = math.inf
    for _ in range(REPEATS):
        seconds, dec = _decode(junk)
        best_junk = min(best_junk, seconds)
        if dec.stats.samples != FRAMES:
            raise RuntimeError(f"decoder lost samples on the error path: {dec.stats}")

    ceiling = math.inf
    for _ in range(REPEATS):
        t0 = time.perf_counter()
        values = np.fromstring(text.translate(bytes.maketrans(b",", b" ")), sep=" ")
        ceiling = min(ceiling, time.perf_counter() - t0)
        if values.size != CHANNELS * FRAMES:
            raise RuntimeError("np.fromstring read the wrong count")

    return [
        ("text decode", FRAMES / best, "samples/s", GOAL),
        (f"text decode, 1 bad line per {JUNK_EVERY}", FRAMES / best_junk, "samples/s", math.nan),
        ("ceiling (np.fromstring one call)", FRAMES / ceiling, "samples/s", math.nan),
    ]


def show(rows: list[tuple[str, float, str, float]]) -> None:
    ceiling = rows[-1]
    print(f"{CHANNELS} channels × {FRAMES:.0e} sample frames, {CHUNK // 1024} KiB chunks")
    for name, value, unit, goal in rows[:-1]:
        target = "(no goal)      " if math.isnan(goal) else f"goal >= {goal:.1e}"
        print(f"{name:<34} {value:7.1e} {unit}   {target}   {ceiling[0]} {ceiling[1]:.1e}")


def headline(rows: list[tuple[str, float, str, float]]) -> list[Figure]:
    return [Figure("decode, text lines", rows[0][1], "samples/s", ">=", GOAL, rows[-1][1],
                   "np.fromstring, one call")]  # fmt: skip


def main() -> None:
    show(run())


if __name__ == "__main__":
    main()
