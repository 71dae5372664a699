"""A known modal model with two references, a close pair and a repeated root, as TestData.

Twelve grid points (G1..G12) on a line and an off-grid point X1; acc1 on G3 (a driving
point), acc2 on X1. Six mass-normalised real modes with seeded random shapes:
120 Hz; a close pair at 250 and 251 Hz (0.4 % apart, closer than their half-power
bandwidths of 4 Hz); a repeated root, two modes at 400 Hz; 620 Hz. FRFs are the exact
modal-superposition accelerance (tests/client/analytic.py), no noise.
"""

from __future__ import annotations

import numpy as np

from taprig.client.dataset import TestData
from taprig.firmware_protocol.simpiece import ModalModel

from ..analytic import analytic_test_data

FREQ_HZ = np.array([120.0, 250.0, 251.0, 400.0, 400.0, 620.0])
ZETA = np.array([0.010, 0.008, 0.008, 0.005, 0.005, 0.006])
LINES_HZ = np.arange(0.0, 1000.0 + 1e-9, 0.5)
BAND_HZ = (20.0, 800.0)
REPEATED = (3, 4)


def known_model(seed: int = 7) -> ModalModel:
    rng = np.random.default_rng(seed)
    labels = (*(f"G{i}" for i in range(1, 13)), "X1")
    shapes = rng.normal(size=(len(labels), FREQ_HZ.size)) * 0.5  # kg^-1/2
    coords = np.column_stack([np.linspace(0.0, 1.1, len(labels)), np.zeros((len(labels), 2))])
    return ModalModel(
        labels=labels,
        coords=coords,
        freqs_hz=FREQ_HZ,
        damping_ratio=ZETA,
        shapes=shapes,
        sensors={"acc1": "G3", "acc2": "X1"},
        grid=labels[:12],
        structure="a pole/residue test model",
    )


def known_data(tau_s: float = 0.5, seed: int = 7) -> tuple[ModalModel, TestData]:
    model = known_model(seed)
    return model, analytic_test_data(model, LINES_HZ, tau_s)


def with_noise(data: TestData, coherence: float, seed: int) -> TestData:
    """`data` with complex Gaussian noise on H1 of the size a test of this coherence and
    averages leaves: the random error ε = sqrt(1 − γ²)/(|γ| sqrt(2 n_d)) of |H| and of its
    phase, rad (Bendat & Piersol, Random Data, 4th ed., 2010, §9.2, from memory), per component."""
    import dataclasses

    rng = np.random.default_rng(seed)
    nd = data.n_averages.astype(np.float64)[:, None, None]
    eps = np.sqrt(1.0 - coherence) / (np.sqrt(coherence) * np.sqrt(2.0 * nd))
    noise = rng.standard_normal(data.h1.shape) + 1j * rng.standard_normal(data.h1.shape)
    h1 = data.h1 + eps * np.abs(data.h1) * noise
    return dataclasses.replace(data, h1=h1, coherence=np.full(data.h1.shape, coherence))
