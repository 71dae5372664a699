"""TestData built from the simulated test piece's analytic accelerance (no capture).

A roving-hammer test on a modal model: row i is the tap at grid point i, response r the
fixed sensor r; H1 = H2 = the model's accelerance seen through an exponential window of
time constant tau (every modal decay rate raised by 1/tau), coherence 1, and Gff the
half-sine pulse's one-sided spectral density.
"""

from __future__ import annotations

import math

import numpy as np

from taprig.client.dataset import TestData
from taprig.firmware_protocol.simpiece import ModalModel, accelerance, half_sine_spectrum


def analytic_test_data(
    model: ModalModel,
    freq_hz: np.ndarray,
    tau_s: float,
    *,
    pulse_s: float = 0.0008,
    n_averages: int = 5,
    points: tuple[str, ...] | None = None,
) -> TestData:
    """The TestData of a roving-hammer test of `model` over its grid (or `points`)."""
    labels = tuple(points if points is not None else model.grid)
    sensors = tuple(model.sensors)
    sensor_points = tuple(model.sensors[s] for s in sensors)
    sigma = 0.0 if math.isinf(tau_s) else 1.0 / tau_s
    h = np.array(
        [[accelerance(model, p, at, freq_hz, sigma) for at in sensor_points] for p in labels]
    )
    force = half_sine_spectrum(freq_hz, pulse_s, 30.0, sigma)
    gff = np.tile(2.0 * np.abs(force) ** 2, (len(labels), 1))
    gxx = np.abs(h) ** 2 * gff[:, None, :]
    coords = np.array([model.coords[model.index(p)] for p in labels])
    n = len(labels)
    return TestData(
        rig="analytic",
        rig_id="analytic",
        test="analytic-panel",
        roving_mode="hammer",
        reference=sensor_points[0],
        freq_hz=np.asarray(freq_hz, dtype=np.float64),
        h1=h,
        h2=h.copy(),
        coherence=np.ones(h.shape),
        gff=gff,
        gxx=gxx,
        points=labels,
        coords=coords,
        directions=("+z",) * n,
        responses=sensors,
        response_points=(sensor_points,) * n,
        drive_points=labels,
        n_averages=np.full(n, n_averages, dtype=np.int64),
        rejections=tuple({} for _ in labels),
        exp_tau_s=float(tau_s),
        point_set_ids=tuple(range(1, n + 1)),
        versions=(1,) * n,
        seqs=tuple(range(2, n + 2)),
        grid=tuple((p, *map(float, c), "+z") for p, c in zip(labels, coords, strict=True)),
        meta={"sample_rate_hz": 2.0 * float(freq_hz[-1]), "exp_tau_s": tau_s, "test": "x"},
    )
