"""The modal fit (client/modal/): speed at the demo's size, scaling, and a Monte-Carlo of
its scatter under noise.

1. The demo-sized test: the simulated panel's analytic accelerance (tests/client/analytic.py),
   30 points × 2 references, 1.5625 Hz lines over 1.5 to 2031 Hz (1,300 lines), the
   stabilization diagram over orders 12 to 60. Goal (the issue's): the whole fit <= 2 s.
   Ceiling: building the reduced normal equations once at the top order (the one pass over
   the data every order's poles come from), and the eigenvalue problems alone.
2. Scaling: the same test tiled to 30, 120 and 480 points (each copy a point of its own).
3. Monte-Carlo: the known model of tests/client/modal/synthetic.py (120 Hz isolated,
   250/251 Hz close pair, 400 Hz repeated root, 620 Hz) with the random error a test of
   coherence γ² and 5 averages leaves (Bendat & Piersol, Random Data, 4th ed., 2010,
   §9.2, from memory: ε = sqrt(1 − γ²)/(|γ| sqrt(2 n_d)) of |H|); bias and standard deviation of f
   (ppm) and ζ (%) over the runs for the isolated mode and the close pair, printed beside ε.

Run: python tests/bench/bench_modal.py [--quick]
"""

from __future__ import annotations

import argparse
import dataclasses
import math
import sys
import time
from pathlib import Path

import numpy as np
import table
from table import Figure, Row, pick
from threadpoolctl import threadpool_limits

HERE = Path(__file__).resolve()
sys.path.insert(0, str(HERE.parents[1]))  # tests/, for the client test helpers as a package

from client.analytic import analytic_test_data  # noqa: E402
from client.modal.synthetic import BAND_HZ, FREQ_HZ, ZETA, known_data, with_noise  # noqa: E402

from taprig.client.modal import fit, plscf  # noqa: E402
from taprig.firmware_protocol.simpiece import demo_panel  # noqa: E402

RATE_HZ = 25_600.0
BLOCK = 16_384
BAND = (1.5, 2031.0)
TOP_ORDER = 60


def demo_sized(points: int) -> object:
    freq = np.arange(BLOCK // 2 + 1) * RATE_HZ / BLOCK
    base = analytic_test_data(demo_panel(3000.0), freq, 0.14)
    copies = -(-points // len(base.points))

    def tile(a: np.ndarray) -> np.ndarray:
        return np.concatenate([a] * copies)[:points]

    labels = tuple(f"P{i:03d}" for i in range(points))
    return dataclasses.replace(
        base, h1=tile(base.h1), h2=tile(base.h2), coherence=tile(base.coherence),
        gff=tile(base.gff), gxx=tile(base.gxx), points=labels, coords=tile(base.coords),
        directions=("+z",) * points, response_points=(base.response_points[0],) * points,
        drive_points=labels, n_averages=tile(base.n_averages), rejections=({},) * points,
        point_set_ids=tuple(range(points)), versions=(1,) * points, seqs=tuple(range(points)),
    )  # fmt: skip


def best_of(call: object, repeat: int = 3) -> float:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        call()  # type: ignore[operator]
        times.append(time.perf_counter() - t0)
    return min(times)


def ceilings(data: object) -> tuple[float, float]:
    """(normal matrix at the top order, every order's eigenvalue problem), seconds."""
    h1 = data.h1  # type: ignore[attr-defined]
    freq = data.freq_hz  # type: ignore[attr-defined]
    lines = (freq >= BAND[0]) & (freq <= BAND[1])
    f = freq[lines]
    dt = 1.0 / (2.0 * f[-1])
    w = plscf.line_weights(data.coherence[..., lines], data.n_averages)  # type: ignore[attr-defined]
    with threadpool_limits(limits=1, user_api="blas"):
        t_m = best_of(lambda: plscf.normal_matrix(h1[..., lines], 2 * math.pi * f * dt, w,
                                                  TOP_ORDER))  # fmt: skip
        m = plscf.normal_matrix(h1[..., lines], 2 * math.pi * f * dt, w, TOP_ORDER)
        t_eig = best_of(lambda: [plscf.poles_at_order(m, n, 2, dt, BAND)
                                 for n in range(12, TOP_ORDER + 1)])  # fmt: skip
    return t_m, t_eig


def monte_carlo(runs: int) -> list[Row]:
    _, data = known_data(0.5)
    rows: list[Row] = []
    for coherence in (0.9, 0.95, 0.99):
        eps = math.sqrt(1 - coherence) / (math.sqrt(coherence) * math.sqrt(2 * 5))
        f_err, z_err, misses = [], [], 0
        for seed in range(runs):
            m = fit(with_noise(data, coherence, seed), band=BAND_HZ)
            if m.n_modes != FREQ_HZ.size:
                misses += 1
                continue
            f_err.append(m.freq_hz / FREQ_HZ - 1.0)
            z_err.append(m.damping_ratio / ZETA - 1.0)
        fe, ze = np.array(f_err), np.array(z_err)
        head = f"γ² {coherence:.2f} (ε {100 * eps:.1f} %)"
        rows.append((f"{head}: runs with all 6 modes", runs - misses, "of", f"{runs}"))
        for k, what in ((0, "120 Hz isolated"), (1, "250 Hz close pair")):
            if fe.size == 0:
                continue
            rows.append((f"  {what}: f bias", 1e6 * fe[:, k].mean(), "ppm",
                         f"sd {1e6 * fe[:, k].std():.0f} ppm"))  # fmt: skip
            rows.append((f"  {what}: ζ bias", 100 * ze[:, k].mean(), "%",
                         f"sd {100 * ze[:, k].std():.2f} %"))  # fmt: skip
    return rows


def run(quick: bool = False) -> list[Row]:
    rows: list[Row] = []
    data = demo_sized(30)
    model = fit(data, band=BAND)  # type: ignore[arg-type]
    t_fit = best_of(lambda: fit(data, band=BAND), 1 if quick else 3)  # type: ignore[arg-type]
    n_lines = int(model.synth_freq_hz.size)
    rows.append((f"fit, 30 points x 2 refs, {n_lines} lines, orders 12..60 "
                 f"({model.n_modes} modes)", t_fit * 1e3, "ms", "goal <= 2000"))  # fmt: skip
    t_m, t_eig = ceilings(data)
    rows.append(("  ceiling: reduced normal matrix, order 60", t_m * 1e3, "ms", ""))
    rows.append(("  the 49 orders' eigenproblems alone", t_eig * 1e3, "ms", ""))
    for points in (120, 480) if not quick else (120,):
        big = demo_sized(points)
        t_big = best_of(lambda b=big: fit(b, band=BAND), 1)  # type: ignore[misc]
        rows.append((f"fit, {points} points", t_big * 1e3, "ms",
                     f"x{t_big / t_fit:.1f} the 30-point fit"))  # fmt: skip
    rows += monte_carlo(4 if quick else 25)
    return rows


def show(rows: list[Row]) -> None:
    table.show(rows, decimals=1)


def headline(rows: list[Row]) -> list[Figure]:
    return [
        Figure("modal fit, demo size (30 x 2)", pick(rows, "fit, 30 points"), "ms", "<=",
               2000.0, pick(rows, "  ceiling: reduced"), "normal matrix once, order 60"),
    ]  # fmt: skip


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--quick", action="store_true")
    show(run(parser.parse_args().quick))


if __name__ == "__main__":
    main()
