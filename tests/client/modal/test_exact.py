"""pLSCF + LSFD on exact FRFs of a known pole/residue model: what must come back exactly.

Source of every expected value: the model itself (tests/client/modal/synthetic.py), whose
FRFs are the closed-form modal superposition of mass-normalised modes,
A(ω) = Σ_r φ_r(i) φ_r(j) s² / (s² + 2ζ_rω_r s + ω_r²), s = 1/τ + iω (Ewins, Modal Testing,
2nd ed., 2000, §2.3, from memory; the exponential window by the shift theorem of the
Laplace transform). The poles are λ_r = −ζ_rω_r + iω_r sqrt(1 − ζ_r²).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from taprig.client.modal import ModalModel, fit
from taprig.client.modal.quality import mac, mpc

from .synthetic import BAND_HZ, FREQ_HZ, REPEATED, ZETA, known_data

TAU_S = 0.5


@pytest.fixture(scope="module")
def exact() -> tuple[object, ModalModel]:
    model, data = known_data(TAU_S)
    return model, fit(data, band=BAND_HZ, orders=(4, 24))


def true_poles() -> np.ndarray:
    w = 2.0 * math.pi * FREQ_HZ
    return -ZETA * w + 1j * w * np.sqrt(1.0 - ZETA**2)


def test_poles_come_back_to_1e6(exact: tuple[object, ModalModel]) -> None:
    """Every mode, the close pair and both modes of the repeated root included: natural
    frequency and damping (window removed) to 1e-6 relative; the windowed damping is
    ζ_w = (ζω + 1/τ)/|λ − 1/τ| (the window adds 1/τ to every decay rate)."""
    _, m = exact
    assert m.n_modes == FREQ_HZ.size
    assert np.allclose(m.freq_hz, FREQ_HZ, rtol=1e-6, atol=0.0)
    assert np.allclose(m.damping_ratio, ZETA, rtol=1e-6, atol=0.0)
    shifted = true_poles() - 1.0 / TAU_S
    assert np.allclose(m.damping_ratio_windowed, -shifted.real / np.abs(shifted), rtol=1e-6)


def test_shapes_mac_and_unit_modal_mass(exact: tuple[object, ModalModel]) -> None:
    """MAC > 0.9999 with the true shape (Allemang & Brown 1982); single modes scaled to unit
    modal mass at the driving point G3/acc1 match the mass-normalised φ to 1e-4; MPC of a
    real mode is 1 (Pappa, Elliott & Schenk 1993). The repeated root's shapes are held to
    the plane of its two true shapes (the data fix the plane, not a basis in it), and to
    MAC < 0.1 between themselves."""
    model, m = exact
    phi = model.shapes_at(list(m.point))  # (P, modes)
    for k in range(m.n_modes):
        if k in REPEATED:
            plane = phi[:, list(REPEATED)]
            proj = plane @ np.linalg.lstsq(plane, m.shape[k], rcond=None)[0]
            assert mac(m.shape[k], proj)[0, 0] > 0.9999
            assert m.scaling[k] == "unit norm"
            continue
        assert mac(m.shape[k], phi[:, k].astype(complex))[0, 0] > 0.9999, k
        assert m.scaling[k] == "unit modal mass"
        sign = np.sign(m.shape[k].real @ phi[:, k])
        assert np.allclose(sign * m.shape[k], phi[:, k], atol=1e-4 * np.abs(phi[:, k]).max())
    assert m.mac[REPEATED] < 0.1
    assert np.all(mpc(m.shape) > 0.9999)
    assert m.meta["driving_point"] == "G3 (acc1)"


def test_close_pair_separates(exact: tuple[object, ModalModel]) -> None:
    """The 250/251 Hz pair (0.4 % apart, 1 Hz against half-power bandwidths of about
    2ζf + 1/(πτ) = 4.6 Hz: one peak in |H|) comes back as two modes whose shapes keep the
    true pair's MAC (both from the model)."""
    model, m = exact
    phi = model.shapes_at(list(m.point))
    true_pair = mac(phi[:, 1].astype(complex), phi[:, 2].astype(complex))[0, 0]
    assert m.mac[1, 2] == pytest.approx(true_pair, abs=1e-4)


def test_one_reference_says_it_cannot_see_a_repeated_root() -> None:
    """The same test with one sensor (acc1) only: one reference. The repeated root cannot
    be split (its residue has rank 1 with one reference), so the model says so; the
    single modes still come back to 1e-6 (source: the model, as above)."""
    import dataclasses

    _, data = known_data(TAU_S)
    first = tuple(r[:1] for r in data.response_points)
    one = dataclasses.replace(data, h1=data.h1[:, :1], h2=data.h2[:, :1],
                              coherence=data.coherence[:, :1], gxx=data.gxx[:, :1],
                              responses=data.responses[:1], response_points=first)  # fmt: skip
    m = fit(one, band=BAND_HZ, orders=(8, 48))
    assert any("repeated root" in note for note in m.meta["notes"])
    assert all("single_reference" in f for f in m.flags)
    single = [0, 1, 2, 5]
    for k in single:
        assert np.min(np.abs(m.freq_hz / FREQ_HZ[k] - 1.0)) < 1e-6


def test_roving_sensor_test_has_the_hammer_point_as_its_reference() -> None:
    """A roving accelerometer with the hammer fixed on G3: H(point, G3) equals the roving
    hammer's H(G3, point) by Maxwell's reciprocity, so the same numbers laid out as a
    roving-sensor test give the same single modes, scaled to unit modal mass at the row
    measured on G3 (source: the model, as above)."""
    import dataclasses

    model, data = known_data(TAU_S)
    n = len(data.points)
    sensor = dataclasses.replace(
        data, roving_mode="sensor", reference="G3", h1=data.h1[:, :1], h2=data.h2[:, :1],
        coherence=data.coherence[:, :1], gxx=data.gxx[:, :1], responses=("acc",),
        response_points=tuple((p,) for p in data.points), drive_points=("G3",) * n,
    )  # fmt: skip
    m = fit(sensor, band=BAND_HZ, orders=(8, 48))
    assert m.reference == ("G3",) and m.meta["driving_point"] == "G3 (hammer)"
    phi = model.shapes_at(list(m.point))
    for k in (0, 1, 2, 5):
        (j,) = np.flatnonzero(np.abs(m.freq_hz / FREQ_HZ[k] - 1.0) < 1e-6)
        assert m.scaling[j] == "unit modal mass"
        assert mac(m.shape[j], phi[:, k].astype(complex))[0, 0] > 0.9999
        if k in (0, 5):  # isolated: the scale too (the close pair's residues, from one
            # reference, carry their poles' last digits a thousandfold)
            sign = np.sign(m.shape[j].real @ phi[:, k])
            atol = 1e-4 * np.abs(phi[:, k]).max()
            assert np.allclose(sign * m.shape[j], phi[:, k], atol=atol)
