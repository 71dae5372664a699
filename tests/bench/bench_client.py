"""Workstation side: the quick-look check, exports and plots of a large test.

The test: 210 points × 2 responses × 8193 lines (a 16384-sample block), the simulated
panel's analytic FRFs with 1 % complex noise (so the noise floor above the force band is full
of small local maxima: the second check row takes the band to 11.5 kHz, the peak
picker's worst case). Printed beside each figure: a bare pass over the
same arrays (np.abs(H1).sum, the floor any check pays; a raw np.save of H1, H2 and the
coherence, the floor of any export) and a goal. Goals (ours): the check answers within
2 s, as a shop-floor command the operator waits for; the npz export within 3 s; the CSV
(text, one row per line per point per response) at least 200 000 rows/s; one FRF PNG
within 1 s.

Run: python tests/bench/bench_client.py [--points 210]
"""

from __future__ import annotations

import argparse
import dataclasses
import math
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np
import table
from table import Figure, Row, pick

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "client"))

from analytic import analytic_test_data

from taprig.client.check import CheckSettings, check
from taprig.client.export import export
from taprig.client.plots import frf_figure
from taprig.firmware_protocol.simpiece import demo_panel

RATE_HZ = 25_600.0
BLOCK = 16_384


def seconds(call: Callable[[], object]) -> float:
    t0 = time.perf_counter()
    call()
    return time.perf_counter() - t0


def make_data(points: int) -> object:
    freq = np.arange(BLOCK // 2 + 1) * RATE_HZ / BLOCK
    base = analytic_test_data(demo_panel(3000.0), freq, 0.14)
    copies = -(-points // len(base.points))
    rng = np.random.default_rng(11)

    def tile(a: np.ndarray) -> np.ndarray:
        return np.concatenate([a] * copies)[:points]

    h1 = tile(base.h1)
    h1 = h1 * (1.0 + 0.01 * (rng.standard_normal(h1.shape) + 1j * rng.standard_normal(h1.shape)))
    labels = tuple(f"P{i:03d}" for i in range(points))
    return dataclasses.replace(
        base, h1=h1, h2=h1 * 1.01, coherence=tile(base.coherence), gff=tile(base.gff),
        gxx=tile(base.gxx), points=labels, coords=tile(base.coords),
        directions=("+z",) * points, response_points=(base.response_points[0],) * points,
        drive_points=labels, n_averages=tile(base.n_averages),
        rejections=({},) * points, point_set_ids=tuple(range(points)),
        versions=(1,) * points, seqs=tuple(range(points)),
    )  # fmt: skip


def run(points: int = 210) -> list[Row]:
    data = make_data(points)
    h1 = data.h1  # type: ignore[attr-defined]
    rows: list[Row] = []
    floor = seconds(lambda: np.abs(h1).sum(axis=(0, 1)))
    t_check = seconds(lambda: check(data))  # type: ignore[arg-type]
    n_modes = len(check(data).modes)  # type: ignore[arg-type]
    rows.append((f"check, {points} points ({n_modes} peaks)", t_check * 1e3, "ms", "goal <= 2000"))
    rows.append(("  floor: np.abs(H1).sum, every line", floor * 1e3, "ms", ""))
    whole = CheckSettings(band_hz=(1.0, 0.45 * RATE_HZ))
    t_whole = seconds(lambda: check(data, whole))  # type: ignore[arg-type]
    n_whole = len(check(data, whole).modes)  # type: ignore[arg-type]
    rows.append((f"check, band to 11.5 kHz ({n_whole} peaks)", t_whole * 1e3, "ms", "goal <= 2000"))
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp)
        raw = out / "raw.npy"
        stacked = np.stack([h1, data.h2, data.coherence])  # type: ignore[attr-defined]
        t_raw = seconds(lambda: np.save(raw, stacked))
        t_npz = seconds(lambda: export(data, out / "t.npz", "npz"))  # type: ignore[arg-type]
        rows.append(("export npz", t_npz * 1e3, "ms", "goal <= 3000"))
        rows.append(("  floor: np.save of H1, H2, coherence", t_raw * 1e3, "ms", ""))
        packed = out / "packed.npz"
        t_zip = seconds(lambda: np.savez_compressed(packed, stacked))
        ratio = packed.stat().st_size / raw.stat().st_size
        rows.append((f"  np.savez_compressed instead (size x{ratio:.2f})", t_zip * 1e3, "ms", ""))
        t_h5 = seconds(lambda: export(data, out / "t.h5", "hdf5"))  # type: ignore[arg-type]
        rows.append(("export hdf5", t_h5 * 1e3, "ms", "beside npz above"))
        n_rows = h1.shape[0] * h1.shape[1] * h1.shape[2]
        t_csv = seconds(lambda: export(data, out / "t.csv", "csv"))  # type: ignore[arg-type]
        rows.append(("export csv, rows/s", n_rows / t_csv, "rows/s", "goal >= 200000"))
        t_png = seconds(lambda: frf_figure(data, 0).savefig(out / "p.png"))  # type: ignore[arg-type]
        rows.append(("one FRF PNG (8192 lines x 2 responses)", t_png * 1e3, "ms", "goal <= 1000"))
    return rows


def show(rows: list[Row]) -> None:
    table.show(rows, decimals=2)


def headline(rows: list[Row]) -> list[Figure]:
    nan = math.nan
    return [
        Figure("quick-look check, 210 points", pick(rows, "check, "), "ms", "<=", 2000.0,
               pick(rows, "  floor: np.abs"), "one pass over |H1|"),
        Figure("npz export, 210 points", pick(rows, "export npz"), "ms", "<=", 3000.0,
               pick(rows, "  floor: np.save"), "np.save of the arrays"),
        Figure("csv export", pick(rows, "export csv"), "rows/s", ">=", 200_000.0, nan, ""),
        Figure("one FRF PNG", pick(rows, "one FRF PNG"), "ms", "<=", 1000.0, nan, ""),
    ]  # fmt: skip


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--points", type=int, default=210)
    show(run(parser.parse_args().points))


if __name__ == "__main__":
    main()
