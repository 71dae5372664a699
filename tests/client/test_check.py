"""The quick-look check against the simulated test piece's truth: analytic FRFs and a capture.

Acceptance for every mode that the test's own rule (`judged_modes`) says the data can
show: natural frequency within 1 %, Q within 10 % once the exponential window's share is
removed, and a deflection shape whose MAC with the true shape over the grid exceeds 0.95.
"""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
import pytest
from scipy.signal import find_peaks
from scipy.signal import peak_prominences as scipy_prominences

from taprig.client import dataset
from taprig.client.band import force_band_tops
from taprig.client.check import (
    CheckResult,
    CheckSettings,
    check,
    peak_prominences,
    pick_peaks,
    report_text,
)
from taprig.firmware_protocol.simpiece import ModalModel, demo_panel, half_sine_spectrum

from .analytic import analytic_test_data
from .conftest import Captured

PANEL = demo_panel(3000.0)
FREQ = np.arange(0.0, 4000.0 + 1e-9, 0.5)  # Hz, 0.5 Hz lines
TAU_S = 0.5


@pytest.fixture(scope="module")
def analytic() -> dataset.TestData:
    return analytic_test_data(PANEL, FREQ, TAU_S)


def mac(a: np.ndarray, b: np.ndarray) -> float:
    """Modal assurance criterion of two real shapes (Allemang and Brown, 1982, "A correlation
    coefficient for modal vector analysis", Proc. 1st IMAC)."""
    return float((a @ b) ** 2 / ((a @ a) * (b @ b)))


def model_point(model: ModalModel, name: str) -> str:
    """The model's label of a place as a rig names it: a label, or "x,y,z" (m) off the grid."""
    if "," not in name:
        return name
    xyz = np.array([float(c) for c in name.split(",")])
    row = int(np.argmin(np.linalg.norm(model.coords - xyz, axis=1)))
    assert np.allclose(model.coords[row], xyz, atol=1e-6), name
    return model.labels[row]


def judged_modes(model: ModalModel, data: dataset.TestData, band: tuple[float, float]) -> list[int]:
    """The modes a peak picker can honestly be held to, by rule, from the truth model alone.

    A mode is judged when (1) its natural frequency lies in the analysis band; (2) every
    other mode is at least 3 half-power bandwidths away (bandwidth 2ζf + 1/(πτ), the
    window's share included; half-power bandwidth of a single mode, Ewins, Modal Testing,
    2nd ed., 2000, §4.3, from memory): closer modes merge into one peak; and (3) at its
    natural frequency its own share of the summed |H| over the test's (point, sensor)
    pairs is at least 3 times what all other modes put there: a mode the fixed sensors
    barely see (a sensor near its nodal line) does not rise out of its neighbours' tails.
    """
    sigma = 0.0 if math.isinf(data.exp_tau_s) else 1.0 / data.exp_tau_s
    phi_rows = model.shapes_at(list(data.points))
    # The fixed end of every FRF: the sensors (roving hammer) or the struck point (roving sensor).
    fixed = data.response_points[0] if data.roving_mode == "hammer" else data.drive_points[:1]
    phi_sensors = model.shapes_at([model_point(model, name) for name in fixed])
    pair = phi_rows[:, None, :] * phi_sensors[None, :, :]  # (P, R, modes)
    w, zeta, f_n = model.omega, model.damping_ratio, model.freqs_hz
    out = []
    for r in range(model.n_modes):
        if not band[0] <= f_n[r] <= band[1]:
            continue
        width = 2.0 * zeta[r] * f_n[r] + sigma / math.pi
        gap = float(np.min(np.abs(np.delete(f_n, r) - f_n[r])))
        s = sigma + 2j * math.pi * f_n[r]
        share = pair * (s * s / (s * s + 2.0 * zeta * w * s + w * w))
        own = np.abs(share[..., r]).sum()
        others = np.abs(share.sum(axis=-1) - share[..., r]).sum()
        if gap >= 3.0 * width and own >= 3.0 * others:
            out.append(r)
    return out


def assert_modes_match(result: CheckResult, model: ModalModel, judged: list[int]) -> None:
    grid_shapes = model.shapes_at(list(result.points))
    for r in judged:
        f_true = float(model.freqs_hz[r])
        q_true = 0.5 / float(model.damping_ratio[r])
        peak = min(result.modes, key=lambda m: abs(m.freq_hz - f_true))
        where = f"mode {r} ({f_true:.1f} Hz)"
        assert abs(peak.freq_hz / f_true - 1.0) <= 0.01, f"{where}: found {peak.freq_hz:.2f} Hz"
        assert abs(peak.q / q_true - 1.0) <= 0.10, f"{where}: Q {peak.q:.1f}, true {q_true:.1f}"
        value = mac(np.array(peak.shape), grid_shapes[:, r])
        assert value > 0.95, f"{where}: MAC {value:.3f}"


def test_modes_of_the_analytic_frfs_match_the_truth(analytic: dataset.TestData) -> None:
    """Frequencies within 1 %, Q within 10 %, MAC > 0.95, on exact FRFs of the demo panel.

    Source: the simulated panel's truth (a simply supported Kirchhoff plate, Leissa,
    Vibration of Plates, NASA SP-160, 1969) and its closed-form accelerance by modal
    superposition (Ewins 2000, ch. 2, from memory), seen through an exponential window of
    τ = 0.5 s: H(ω − i/τ), every modal decay rate raised by 1/τ (the shift theorem of the
    Laplace transform). The measured Q without the window correction is also checked to
    be off by more than the tolerance for the first mode, so the correction is tested.
    """
    result = check(analytic)
    judged = judged_modes(PANEL, analytic, result.band_hz)
    assert len(judged) >= 6, judged
    assert_modes_match(result, PANEL, judged)
    first = min(result.modes, key=lambda m: abs(m.freq_hz - PANEL.freqs_hz[0]))
    assert first.q_measured < 0.8 * 0.5 / PANEL.damping_ratio[0]


def test_captured_test_modes_match_the_truth(captured_panel: Captured) -> None:
    """The same acceptance on a test the daemon captured from the simulated test piece.

    Source: the instrument's truth file (write_truth / load_truth of its modal model);
    the daemon's H1 from two taps per point, windowed with the exponential window whose
    τ the point sets record. Modes judged by `judged_modes` (the rule, not a hand list).
    """
    data, truth = captured_panel.data, captured_panel.truth
    result = check(data)
    assert 1000.0 < result.band_hz[1] < 1500.0  # the medium tip's 10 dB force band
    judged = judged_modes(truth, data, result.band_hz)
    assert len(judged) >= 6, judged
    assert_modes_match(result, truth, judged)
    # Two clean taps per point, as the test asked: coherent, in band, nothing to redo ...
    assert data.planned_averages == 2
    assert {pc.flags for pc in result.point_checks} == {()}
    # ... but held to three averages, every point asks for another tap.
    strict = check(data, CheckSettings(min_averages=3))
    assert {pc.flags for pc in strict.point_checks} == {("few_averages",)}
    assert min(min(pc.mean_coherence) for pc in result.point_checks) > 0.95
    (dp,) = result.driving_points
    assert (dp.point, dp.response) == ("B3", "acc1") and dp.ok, dp


def test_roving_sensor_mode_sees_the_same_modes(analytic: dataset.TestData) -> None:
    """A roving accelerometer with the hammer fixed on B3 gives the same modes and shapes.

    Source: Maxwell's reciprocity, H(j, k) = H(k, j) for a linear structure (Ewins 2000,
    §2.2, from memory): the FRFs from B3 to every point are the roving-hammer FRFs to the
    sensor on B3, so the same acceptance holds, and the row where the sensor sits on B3 is
    the driving point.
    """
    n = len(analytic.points)
    sensor_mode = dataclasses.replace(
        analytic, roving_mode="sensor", h1=analytic.h1[:, :1], h2=analytic.h2[:, :1],
        coherence=analytic.coherence[:, :1], gxx=analytic.gxx[:, :1], responses=("acc",),
        response_points=tuple((p,) for p in analytic.points), drive_points=("B3",) * n,
    )  # fmt: skip
    result = check(sensor_mode)
    judged = judged_modes(PANEL, sensor_mode, result.band_hz)
    assert len(judged) >= 5, judged
    assert_modes_match(result, PANEL, judged)
    (dp,) = result.driving_points
    assert (dp.point, dp.response) == ("B3", "acc") and dp.ok


def test_driving_point_check_tells_a_cross_point(analytic: dataset.TestData) -> None:
    """B3/acc1 passes; a cross point passed off as a driving point fails.

    Source: at a driving point Im A > 0 at every resonance (A ≈ iφ²/(2ζ) under the
    e^{−iωt} convention of numpy's FFT) and resonances and anti-resonances alternate
    (Foster, "A reactance theorem", Bell System Technical Journal, 1924). A1's FRF to the
    sensor on B3 has modal constants φ(A1)φ(B3) of both signs, so both rules fail there.
    """
    (dp,) = check(analytic).driving_points
    assert dp.ok and len(dp.resonances_hz) >= 8
    rows = list(analytic.response_points)
    i = analytic.points.index("A1")
    rows[i] = ("A1", rows[i][1])  # claim acc1 sat on A1
    fake = dataclasses.replace(analytic, response_points=tuple(rows))
    bad = [d for d in check(fake).driving_points if d.point == "A1"]
    assert len(bad) == 1 and not bad[0].ok
    assert bad[0].wrong_sign_hz and bad[0].no_antiresonance_hz


def test_point_flags(analytic: dataset.TestData) -> None:
    """Each flag rule fires on its own cause and only there.

    Source for the force band: the half-sine pulse's spectrum |F(f)| ∝ |cos(πfT)/(1 −
    (2fT)²)| (Fourier transform of a half-sine, any table of transforms); for T = 0.8 ms
    it first falls 10 dB below its low-frequency level near 1.27 kHz, for T = 1.6 ms near
    half that, so a soft tip's point is flagged.
    """
    n = len(analytic.points)
    soft = np.abs(half_sine_spectrum(FREQ, 0.0016, 30.0, 1.0 / TAU_S)) ** 2 * 2.0
    gff = analytic.gff.copy()
    gff[3] = soft
    coherence = analytic.coherence.copy()
    coherence[5, 1] *= 0.8
    n_avg = np.array(analytic.n_averages)
    n_avg[7] = 1
    rejections = list(analytic.rejections)
    rejections[7] = {"double_hit": 2}
    data = dataclasses.replace(
        analytic, gff=gff, coherence=coherence, n_averages=n_avg, rejections=tuple(rejections)
    )
    result = check(data)
    flags = {pc.point: pc.flags for pc in result.point_checks if pc.flags}
    points = analytic.points
    assert flags == {
        points[3]: ("narrow_force_band",),
        points[5]: ("low_coherence",),
        points[7]: ("few_averages",),
    }
    assert result.point_checks[7].rejections == {"double_hit": 2}
    assert result.point_checks[5].mean_coherence[1] == pytest.approx(0.8)
    tops = force_band_tops(FREQ, gff)
    # cos(πfT)/(1 − (2fT)²) = 10^(−10/20) solved numerically for T = 0.8 ms: 1.27 kHz.
    assert tops[0] == pytest.approx(1274.5, abs=1.0)
    assert tops[3] == pytest.approx(0.5 * 1274.5, abs=2.0)
    assert n == len(result.point_checks)


def test_peak_prominences_match_scipy() -> None:
    """Bases and prominences equal scipy.signal.peak_prominences on noisy multi-peak data.

    Source: scipy.signal.peak_prominences (SciPy reference), the definition the check
    documents.
    """
    rng = np.random.default_rng(7)
    f = np.linspace(0.0, 1.0, 4001)
    y = sum(1.0 / np.hypot(f - c, 0.004) for c in (0.1, 0.13, 0.5, 0.56, 0.8))
    y = y * (1.0 + 0.05 * rng.standard_normal(f.size)) + 1.0
    peaks, _ = find_peaks(y)
    left, right = peak_prominences(y, peaks.astype(np.intp))
    expected, _, _ = scipy_prominences(y, peaks)
    np.testing.assert_allclose(y[peaks] - np.maximum(left, right), expected, rtol=0, atol=1e-12)
    chosen, prom_db = pick_peaks(y, 6.0, 40.0)
    ratio = y[peaks] / (y[peaks] - expected)
    want = peaks[20.0 * np.log10(ratio) >= 6.0]
    np.testing.assert_array_equal(chosen, want)
    assert len(chosen) == 5 and np.all(prom_db >= 6.0)


def test_report_and_json(analytic: dataset.TestData) -> None:
    result = check(analytic)
    text = report_text(result)
    assert "tap again: none" in text and "B3 / acc1: ok" in text
    assert f"{result.modes[0].freq_hz:.2f}" in text
    data = json.loads(json.dumps(result.to_dict(), allow_nan=False))
    assert len(data["modes"]) == len(result.modes)
    assert data["modes"][0]["shape"] == list(result.modes[0].shape)
    assert data["driving_points"][0]["ok"] is True
    assert data["settings"]["force_drop_db"] == 10.0


def test_report_names_what_to_do(analytic: dataset.TestData) -> None:
    """A suspect driving point and a point to tap again are spelled out in the text."""
    rows = list(analytic.response_points)
    rows[0] = ("A1", rows[0][1])
    n_avg = np.array(analytic.n_averages)
    n_avg[0] = 1
    text = report_text(
        check(dataclasses.replace(analytic, response_points=tuple(rows), n_averages=n_avg))
    )
    assert "tap again: A1\n" in text
    assert "A1 / acc1: SUSPECT" in text and "Im A <= 0 at resonance" in text
    assert "no anti-resonance between" in text


def test_bad_settings_and_bands_are_named(analytic: dataset.TestData) -> None:
    with pytest.raises(ValueError, match=r"band 500\.0:100\.0 Hz"):
        CheckSettings(band_hz=(500.0, 100.0))
    with pytest.raises(ValueError, match="min_prominence_db"):
        CheckSettings(min_prominence_db=2.0)
    with pytest.raises(ValueError, match=r"band 5000\.0:6000\.0 Hz holds 0"):
        check(analytic, CheckSettings(band_hz=(5000.0, 6000.0)))
