"""What float32 spectra (schema 2) keep of an analytic device's FRF.

The reference is the simulated test piece's closed-form accelerance of the demo panel (modal
superposition, H(ω) = Σ φ_r(k) φ_r(j) (-ω²) / (ω_r² - ω² + 2iζ_r ω_r ω); Ewins, Modal
Testing: Theory, Practice and Application, 2nd ed., 2000, §2.6, from memory), evaluated in
float64. A point set whose spectra are those of a noise-free measurement of it (Gff, Gfx =
H·Gff, Gxx = |H|²·Gff, coherence 1) goes through the wire codec, which stores and sends the
spectra as IEEE 754-2008 binary32 (24-bit significand: each part of each value rounded to
within 2⁻²⁴ of itself, relative; §3.6 table 3.5, §4.3.1).

The bounds below are those of rounding alone, and far inside the 0.05 % to which the FRF
tests compare captured FRFs with analytic devices.
"""

from __future__ import annotations

import numpy as np

from taprig.firmware_protocol.simpiece import DEMO_DRIVING_POINT, accelerance, demo_panel
from taprig.schema import pointset
from taprig.schema.records import WirePointSet

from .fixtures import fields_of, make_point_set, through_wire

U = 2.0**-24  # binary32 unit roundoff (IEEE 754-2008, round to nearest)
FRF_TOLERANCE = 5e-4  # 0.05 %: how closely the FRF tests hold captured FRFs to the analytic


def analytic_point_set() -> tuple[np.ndarray, np.ndarray, WirePointSet]:
    """(freq Hz, H (R, F) complex128, the point set through the wire)."""
    model = demo_panel()
    freq = np.linspace(5.0, 2_000.0, 4_000)
    sensors = list(model.sensors.values())[:2]
    h = np.stack([accelerance(model, DEMO_DRIVING_POINT, p, freq) for p in sensors])
    gff = 1e-3 / (1.0 + (freq / 3_000.0) ** 2)  # N²/Hz: a hammer tip's roll-off
    ps = make_point_set(n_resp=len(sensors), n_freq=freq.size, n_hits=0)
    ps = WirePointSet(**{
        **fields_of(ps), "freq_hz": freq, "h1": h, "h2": h, "gff": gff, "gfx": h * gff,
        "gxx": np.abs(h) ** 2 * gff, "coherence": np.ones(h.shape),
    })  # fmt: skip
    return freq, h, through_wire(ps)


def test_stored_h1_and_h2_are_the_analytic_frf_to_float32_rounding() -> None:
    """|Ĥ - H| ≤ √2·2⁻²⁴·|H|: each of the real and imaginary parts is rounded once."""
    _, h, back = analytic_point_set()
    assert back.h1.dtype == pointset.C8 and back.coherence.dtype == pointset.F4
    for est in (back.h1, back.h2):
        rel = np.abs(est.astype(np.complex128) - h) / np.abs(h)
        assert rel.max() <= np.sqrt(2) * U, rel.max()
        assert rel.max() < FRF_TOLERANCE / 1000


def test_h1_h2_and_coherence_recomputed_from_stored_spectra_keep_their_accuracy() -> None:
    """H1 = Gfx/Gff, H2 = Gxx/conj(Gfx) and γ² = |Gfx|²/(Gff·Gxx) (Bendat and Piersol,
    Random Data, 4th ed., 2010, §9.1.3 and §6.1.4) from the stored float32 spectra, computed
    in float64: a quotient of rounded values, so within a few units of 2⁻²⁴."""
    _, h, back = analytic_point_set()
    gff = back.gff.astype(np.float64)
    gfx = back.gfx.astype(np.complex128)
    gxx = back.gxx.astype(np.float64)
    h1 = gfx / gff
    h2 = gxx / np.conj(gfx)
    coh = np.abs(gfx) ** 2 / (gff * gxx)
    assert (np.abs(h1 - h) / np.abs(h)).max() <= 3 * U
    assert (np.abs(h2 - h) / np.abs(h)).max() <= 4 * U
    assert np.abs(coh - 1.0).max() <= 8 * U
    assert np.array_equal(back.coherence, np.ones(h.shape, dtype=np.float32))
