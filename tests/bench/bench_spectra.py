"""Per-hit spectral update time for a 16384-sample block of 4 channels (1 force, 3 responses).

The update is what the daemon does for every accepted hit: force and exponential windows,
one rfft of the stacked channels, and the running auto/cross sums. Printed beside it,
from the same run: a bare numpy.fft.rfft of the same (4, 16384) array (the floor any
implementation pays) and the window construction alone. Each figure is the median of
`repeats` calls. Goal: at most 3 ms per hit, a tenth of the 30 ms per-hit latency budget.

Run: python tests/bench/bench_spectra.py [--repeats 200]
"""

from __future__ import annotations

import argparse
import statistics
import time
from collections.abc import Callable

import numpy as np
import table
from table import Figure, Row, pick

from taprig.daemon.capture.spectra import (
    SpectralAverager,
    WindowSettings,
    exponential_window,
    force_window,
    hit_spectra,
)

BLOCK = 16384
CHANNELS = 4
RATE_HZ = 51_200.0
PRETRIGGER = 256
PULSE_END = 320
BUDGET_MS = 30.0
GOAL_MS = 3.0


def median_ms(call: Callable[[], object], repeats: int) -> float:
    """Median wall time of `call`, ms, after one warm-up call."""
    call()
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        call()
        times.append(time.perf_counter() - t0)
    return statistics.median(times) * 1e3


def run(repeats: int = 200) -> list[Row]:
    rng = np.random.default_rng(5)
    record = rng.normal(size=(CHANNELS, BLOCK))
    windows = WindowSettings(exp_end_value=0.01)
    avg = SpectralAverager(CHANNELS - 1, BLOCK, RATE_HZ)
    responses = tuple(range(1, CHANNELS))

    def update() -> None:
        avg.add(hit_spectra(record, 0, responses, PRETRIGGER, PULSE_END, RATE_HZ, windows))

    def windows_only() -> None:
        force_window(BLOCK, PULSE_END, RATE_HZ, windows.force_margin_s, windows.force_taper_s)
        exponential_window(BLOCK, PRETRIGGER, RATE_HZ, windows.exp_end_value)

    per_hit = median_ms(update, repeats)
    bare = median_ms(lambda: np.fft.rfft(record, axis=-1), repeats)
    win = median_ms(windows_only, repeats)
    return [
        (
            f"per-hit update, {CHANNELS} x {BLOCK}",
            per_hit,
            "ms",
            f"goal <= {GOAL_MS:g} ms ({per_hit / BUDGET_MS:.0%} of the {BUDGET_MS:g} ms "
            f"per-hit budget); {per_hit / bare:.1f}x the bare rfft",
        ),
        ("ceiling: bare np.fft.rfft, same array", bare, "ms", "the FFT alone"),
        ("windows alone (force + exponential)", win, "ms", "part of the update"),
    ]


def headline(rows: list[Row]) -> list[Figure]:
    return [Figure("spectral update per hit", rows[0][1], "ms", "<=", GOAL_MS,
                   pick(rows, "ceiling:"), "bare rfft")]  # fmt: skip


def show(rows: list[Row]) -> None:
    table.show(rows, decimals=3)


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=200)
    show(run(parser.parse_args().repeats))
