"""Reference tests of the spectral stage: windows, auto/cross spectra, H1, H2 and coherence.

Every figure is checked against something outside the project: scipy.signal's spectral
estimators and window functions, closed-form results, or the analytic accelerance of the
simulated structure's modal model (closed form, derived in firmware_protocol/simpiece/
response.py). The source of each check is named in the test's docstring.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import pytest
from numpy.typing import NDArray
from scipy import signal

from taprig.daemon.capture.spectra import (
    NO_EXP_TAU_S,
    HitSpectra,
    SpectralAverager,
    WindowSettings,
    corrected_damping_ratio,
    exp_decay_per_s,
    exp_window_tau,
    exponential_window,
    force_window,
    hit_spectra,
    single_average_warning,
)
from taprig.firmware_protocol.simpiece import (
    DEMO_DRIVING_POINT,
    ModalModel,
    accelerance,
    demo_panel,
    half_sine,
    modal_acceleration,
)

FloatArray = NDArray[np.float64]

# scipy.signal's segment-averaging settings that make welch/csd/coherence the same
# estimators as the averager's: one block per segment, boxcar window, no overlap or detrend.
SCIPY_SEGMENTS = {"window": "boxcar", "noverlap": 0, "detrend": False}


# --------------------------------------------------------------------------------------
# Synthetic hits for the comparisons with scipy
# --------------------------------------------------------------------------------------


def synthetic_hits(
    rng: np.random.Generator, n_hits: int, block: int, rate_hz: float, pretrigger: int
) -> tuple[list[FloatArray], list[int]]:
    """Noisy records (4 channels: responses on rows 0, 1, 3, force on row 2) and pulse ends.

    Force: a half-sine of about 6 samples starting just before the trigger sample; each
    response: the force convolved with a decaying two-mode impulse response, plus noise.
    """
    t = np.arange(block) / rate_hz
    records: list[FloatArray] = []
    ends: list[int] = []
    for _ in range(n_hits):
        width = 6.0 / rate_hz
        t0 = (pretrigger - rng.uniform(0.0, 1.0)) / rate_hz
        force = half_sine(t - t0, width, rng.uniform(20.0, 40.0))
        rec = np.empty((4, block))
        for row in (0, 1, 3):
            f1, f2 = rng.uniform(0.05, 0.2) * rate_hz, rng.uniform(0.2, 0.4) * rate_hz
            h = np.exp(-40.0 * t) * (np.sin(2 * np.pi * f1 * t) + 0.5 * np.sin(2 * np.pi * f2 * t))
            rec[row] = np.convolve(force, h)[:block] + rng.normal(0.0, 0.05, block)
        rec[2] = force + rng.normal(0.0, 0.05, block)
        records.append(rec)
        ends.append(math.ceil((t0 + width) * rate_hz))
    return records, ends


def windowed_concatenation(
    records: Sequence[FloatArray],
    spectra: Sequence[HitSpectra],
    force_row: int,
    response_rows: Sequence[int],
) -> tuple[FloatArray, FloatArray]:
    """The windowed force (n_hits·block,) and responses (n_resp, n_hits·block), hit after hit."""
    pairs = list(zip(records, spectra, strict=True))
    forces = [r[force_row] * s.force_window * s.exp_window for r, s in pairs]
    resps = [r[list(response_rows)] * s.exp_window for r, s in pairs]
    return np.concatenate(forces), np.concatenate(resps, axis=1)


@pytest.mark.parametrize("block", [1024, 1001])
def test_densities_h1_h2_coherence_equal_scipy(block: int) -> None:
    """Gff, Gxx, Gfx, H1, H2 and γ² equal scipy.signal's estimators on the windowed records.

    Source: scipy.signal.welch, csd and coherence (SciPy reference implementation; Welch's
    averaged periodogram, density scaling, one-sided), run on the same windowed records
    concatenated hit after hit with window="boxcar", nperseg=block, noverlap=0,
    detrend=False. H1 = csd(f, x)/welch(f), H2 = welch(x)/csd(x, f). Odd and even blocks
    (the Nyquist line exists only for an even block). Tolerance 1e-10 relative.
    """
    rate, pre = 1000.0, 50
    rng = np.random.default_rng(11)
    records, ends = synthetic_hits(rng, 5, block, rate, pre)
    windows = WindowSettings(force_margin_s=0.010, force_taper_s=0.005, exp_end_value=0.05)
    responses = (0, 1, 3)
    spectra = [
        hit_spectra(r, 2, responses, pre, e, rate, windows)
        for r, e in zip(records, ends, strict=True)
    ]
    avg = SpectralAverager(3, block, rate)
    for s in spectra:
        avg.add(s)
    f, x = windowed_concatenation(records, spectra, 2, responses)

    seg = {**SCIPY_SEGMENTS, "fs": rate, "nperseg": block}
    freq, pff = signal.welch(f, **seg)
    _, pxx = signal.welch(x, axis=-1, **seg)
    _, pfx = signal.csd(f[None, :], x, axis=-1, **seg)
    _, pxf = signal.csd(x, f[None, :], axis=-1, **seg)
    _, coh = signal.coherence(f[None, :], x, axis=-1, **seg)

    assert avg.count == 5
    np.testing.assert_allclose(avg.freq_hz, freq, rtol=1e-12, atol=0)
    np.testing.assert_allclose(avg.gff, pff, rtol=1e-10, atol=0)
    np.testing.assert_allclose(avg.gxx, pxx, rtol=1e-10, atol=0)
    np.testing.assert_allclose(avg.gfx, pfx, rtol=1e-10, atol=0)
    np.testing.assert_allclose(avg.h1(), pfx / pff, rtol=1e-10, atol=0)
    np.testing.assert_allclose(avg.h2(), pxx / pxf, rtol=1e-10, atol=0)
    np.testing.assert_allclose(avg.coherence(), coh, rtol=1e-10, atol=0)
    assert avg.h1().shape == avg.coherence().shape == (3, block // 2 + 1)


def test_spectra_are_one_rfft_of_the_windowed_channels() -> None:
    """F and X are numpy.fft.rfft of the windowed channels, in the order asked for.

    Source: the discrete Fourier transform as numpy.fft.rfft computes it (NumPy
    reference); the windows are those the hit reports, checked on their own below.
    """
    rng = np.random.default_rng(3)
    records, ends = synthetic_hits(rng, 1, 512, 1000.0, 40)
    windows = WindowSettings(force_margin_s=0.02, force_taper_s=0.01, exp_end_value=0.1)
    s = hit_spectra(records[0].astype(np.float32), 2, [3, 0], 40, ends[0], 1000.0, windows)
    rec = records[0].astype(np.float32).astype(np.float64)
    np.testing.assert_allclose(s.F, np.fft.rfft(rec[2] * s.force_window * s.exp_window), 1e-12)
    np.testing.assert_allclose(s.X, np.fft.rfft(rec[[3, 0]] * s.exp_window), rtol=1e-12)
    np.testing.assert_array_equal(s.freq_hz, np.fft.rfftfreq(512, 1e-3))
    assert s.X.shape == (2, 257)
    assert s.tau_s == pytest.approx((511 - 40) / (1000.0 * math.log(10.0)), rel=1e-14)


# --------------------------------------------------------------------------------------
# Coherence identities and the single-average warning
# --------------------------------------------------------------------------------------


def averaged(n_hits: int, seed: int) -> SpectralAverager:
    rng = np.random.default_rng(seed)
    records, ends = synthetic_hits(rng, n_hits, 1024, 1000.0, 50)
    windows = WindowSettings(force_margin_s=0.01, force_taper_s=0.005, exp_end_value=0.05)
    avg = SpectralAverager(3, 1024, 1000.0)
    for rec, end in zip(records, ends, strict=True):
        avg.add(hit_spectra(rec, 2, (0, 1, 3), 50, end, 1000.0, windows))
    return avg


def test_coherence_is_h1_over_h2() -> None:
    """γ² = H1/H2 at every line, a real number in [0, 1].

    Source: Bendat & Piersol, Random Data: Analysis and Measurement Procedures, 4th ed.,
    Wiley 2010, single-input/single-output relationships (ch. 6) and the estimates of §9.1
    (section numbers from memory): H1 = Gfx/Gff, H2 = Gxx/Gxf, so H1/H2 = |Gfx|²/(Gff·Gxx).
    """
    avg = averaged(5, seed=5)
    ratio = avg.h1() / avg.h2()
    coh = avg.coherence()
    np.testing.assert_allclose(ratio.real, coh, rtol=1e-12, atol=0)
    np.testing.assert_allclose(ratio.imag, 0.0, atol=1e-12)
    assert np.all((coh >= 0.0) & (coh <= 1.0 + 1e-12))
    assert coh.min() < 0.9  # the noise shows: five averages do tell something


def test_single_average_has_unit_coherence_and_a_warning() -> None:
    """With one average γ² = 1 identically, whatever the noise; the operator is told so.

    Source: Bendat & Piersol, Random Data, 4th ed., Wiley 2010, §9.1 (from memory): with
    n_d = 1, |Gfx|² = Gff·Gxx exactly, so the coherence estimate is 1 and proves nothing.
    """
    one = averaged(1, seed=7)
    np.testing.assert_allclose(one.coherence(), 1.0, rtol=1e-12)
    text = single_average_warning(one.count)
    assert text is not None and "coherence" in text and "one hit" in text.lower()
    assert single_average_warning(2) is None
    assert single_average_warning(0) is None
    with pytest.raises(ValueError):
        single_average_warning(-1)


def test_divisions_by_zero_give_nan_without_warnings() -> None:
    """A silent record (all zeros) and an empty average give NaN FRFs, no RuntimeWarning.

    Source: IEEE 754 (0/0 is undefined); pytest runs with warnings as errors, so any
    floating-point warning fails this test.
    """
    avg = SpectralAverager(2, 256, 1000.0)
    assert np.isnan(avg.gff).all() and np.isnan(avg.h1()).all() and avg.count == 0
    silent = np.zeros((3, 256))
    avg.add(hit_spectra(silent, 0, (1, 2), 10, 20, 1000.0, WindowSettings(exp_end_value=0.01)))
    assert np.array_equal(avg.gff, np.zeros(129))
    for values in (avg.h1(), avg.h2(), avg.coherence()):
        assert values.shape == (2, 129) and np.isnan(values).all()


def test_averager_refuses_spectra_of_another_shape() -> None:
    """Hits of another block length, response count or rate are refused (common practice:
    only like records are averaged)."""
    avg = SpectralAverager(2, 256, 1000.0)
    rec = np.zeros((3, 128))
    with pytest.raises(ValueError):
        avg.add(hit_spectra(rec, 0, (1, 2), 10, 20, 1000.0, WindowSettings()))
    with pytest.raises(ValueError):
        avg.add(hit_spectra(np.zeros((2, 256)), 0, (1,), 10, 20, 1000.0, WindowSettings()))
    with pytest.raises(ValueError):
        avg.add(hit_spectra(np.zeros((3, 256)), 0, (1, 2), 10, 20, 2000.0, WindowSettings()))
    with pytest.raises(ValueError):
        WindowSettings(exp_end_value=1.0)


# --------------------------------------------------------------------------------------
# Windows
# --------------------------------------------------------------------------------------


def test_force_window_is_unity_through_pulse_and_margin_then_half_hann() -> None:
    """1 through pulse_end + margin, the falling half of a Hann window, then 0.

    Source: scipy.signal.windows.hann (symmetric Hann window, SciPy reference): the taper
    of n samples equals hann(2n + 3)[n + 2 : 2n + 2]; force windows of this kind are common
    practice for hammer channels.
    """
    rate, block, end = 10_000.0, 400, 37
    w = force_window(block, end, rate, margin_s=0.002, taper_s=0.0015)
    margin, n = 20, 15
    assert np.array_equal(w[: end + margin], np.ones(end + margin))
    np.testing.assert_allclose(
        w[end + margin : end + margin + n], signal.windows.hann(2 * n + 3)[n + 2 : 2 * n + 2],
        rtol=1e-13,
    )  # fmt: skip
    assert np.array_equal(w[end + margin + n :], np.zeros(block - end - margin - n))
    assert np.all(np.diff(w) <= 0.0)
    # A margin past the block end keeps the whole record.
    assert np.array_equal(force_window(block, 390, rate, 0.002, 0.001), np.ones(block))


def test_exponential_window_end_value_and_tau() -> None:
    """w = 1 before the trigger, exp(-(k - start)/(rate·tau)) after, w[block-1] = end_value.

    Source: the defining requirement of an exponential window of end value e at the last
    sample, tau = (block - 1 - start)/(rate·ln(1/e)) (common practice; Ewins, Modal Testing:
    Theory, Practice and Application, 2nd ed., 2000, ch. 3, from memory).
    """
    block, start, rate = 16384, 256, 51_200.0
    for end_value in (0.01, 0.05, 0.3):
        w, tau = exponential_window(block, start, rate, end_value)
        assert w[-1] == end_value
        assert tau == pytest.approx((block - 1 - start) / (rate * math.log(1.0 / end_value)))
        assert tau == exp_window_tau(block, start, rate, end_value)
        k = np.arange(block)
        expected = np.where(k < start, 1.0, np.exp(-(k - start) / (rate * tau)))
        np.testing.assert_allclose(w, expected, rtol=1e-13)
    w, tau = exponential_window(block, start, rate, None)
    assert tau == NO_EXP_TAU_S == math.inf and np.array_equal(w, np.ones(block))
    assert exp_decay_per_s(math.inf) == 0.0
    with pytest.raises(ValueError):
        exponential_window(block, block - 1, rate, 0.01)


def test_exponential_window_raises_the_modal_decay_rate() -> None:
    """A windowed free decay is the same mode with decay rate ζω + 1/tau.

    Source: analytic — e^{-ζωt}·sin(ω_d t)·e^{-t/tau} = e^{-(ζω + 1/tau)t}·sin(ω_d t), the
    exponential shift theorem of the Laplace transform (pole λ → λ - 1/tau); hence
    ζ_true = ζ_measured - 1/(ω·tau) (Ewins 2000, ch. 3, from memory). The mode is the demo
    panel's first (f, ζ), its record starting at the trigger sample.
    """
    model = demo_panel()
    f_n, zeta = float(model.freqs_hz[0]), float(model.damping_ratio[0])
    omega = 2 * np.pi * f_n
    w_d = omega * math.sqrt(1 - zeta**2)
    block, start, rate = 16384, 256, 51_200.0
    t = (np.arange(block) - start) / rate
    free = np.where(t >= 0, np.exp(-zeta * omega * t) * np.sin(w_d * t), 0.0)
    w, tau = exponential_window(block, start, rate, 0.01)
    raised = np.where(t >= 0, np.exp(-(zeta * omega + 1.0 / tau) * t) * np.sin(w_d * t), 0.0)
    np.testing.assert_allclose(free * w, raised, rtol=1e-12, atol=1e-15)
    zeta_seen = (zeta * omega + 1.0 / tau) / omega
    assert corrected_damping_ratio(zeta_seen, f_n, tau) == pytest.approx(zeta, rel=1e-12)
    assert corrected_damping_ratio(zeta, f_n, math.inf) == zeta


# --------------------------------------------------------------------------------------
# H1 of the simulated structure against its analytic accelerance
# --------------------------------------------------------------------------------------

RATE_HZ = 51_200.0
BLOCK = 16384
PRETRIGGER = 256
OVERSAMPLE = 32
PULSE_S = 50e-6
"""A hard-tip tap: the half-sine's first spectral zero, 1.5/T = 30 kHz, lies past Nyquist,
so the force spectrum has no zero in the band and is down by only 10.1 dB at 0.8 ×
Nyquist (common practice: choose the tip so the force spectrum stays within 10-20 dB
over the band of interest). A longer pulse puts force zeros in the band, where every
estimate of H is noise-dominated and γ² passes through 0.95 on lines of large error."""


def anti_alias_taps(rate_hz: float, oversample: int) -> FloatArray:
    """Linear-phase FIR at oversample·rate: flat to 0.4·rate, 110 dB down from 0.6·rate.

    Source: Kaiser's window design formulas as scipy.signal.kaiserord/firwin implement them
    (SciPy reference). The band from 0.6·rate folds onto 0..0.4·rate when sampled at rate.
    """
    fine = oversample * rate_hz
    numtaps, beta = signal.kaiserord(110.0, 0.2 * rate_hz / (0.5 * fine))
    taps: FloatArray = signal.firwin(numtaps | 1, 0.5 * rate_hz, window=("kaiser", beta), fs=fine)
    return taps


def sampled_through_anti_alias(
    model: ModalModel,
    drive: str,
    sensors: Sequence[str],
    t0: float,
    peak_n: float,
    taps: FloatArray,
) -> FloatArray:
    """Record (1 + n_sensors, BLOCK): force and accelerations sampled as a front end does.

    The simulated structure gives the continuous signals; a front end passes force and
    responses through the same anti-alias filter before sampling (common practice). Without
    it the half-sine's spectrum above Nyquist folds back into force and response alike,
    and H1 of this panel then misses the accelerance by 15-45 % near antiresonances and
    force zeros. Here the signals are evaluated OVERSAMPLE times finer around the
    pulse, filtered with `taps` and decimated. Away from the pulse (farther than the
    filter's half length) the response is a free decay of modes below 5 kHz, which the
    filter passes with gain 1 to within 1e-5, so the plain samples are kept there.
    """
    t = np.arange(BLOCK) / RATE_HZ
    rec = np.vstack([
        half_sine(t - t0, PULSE_S, peak_n),
        modal_acceleration(model, drive, t, t0, PULSE_S, peak_n, sensor_points=sensors),
    ])  # fmt: skip
    half = taps.size // 2
    reach = -(-half // OVERSAMPLE) + 1
    lo = math.floor(t0 * RATE_HZ) - reach
    hi = math.ceil((t0 + PULSE_S) * RATE_HZ) + reach + 1
    fine_t = (lo * OVERSAMPLE - half + np.arange((hi - 1 - lo) * OVERSAMPLE + 2 * half + 1)) / (
        OVERSAMPLE * RATE_HZ
    )
    fine = np.vstack([
        half_sine(fine_t - t0, PULSE_S, peak_n),
        modal_acceleration(model, drive, fine_t, t0, PULSE_S, peak_n, sensor_points=sensors),
    ])  # fmt: skip
    for row, values in enumerate(fine):
        rec[row, lo:hi] = np.convolve(values, taps, mode="valid")[::OVERSAMPLE]
    return rec


@pytest.fixture(scope="module")
def panel_point() -> tuple[ModalModel, SpectralAverager, float, tuple[str, ...]]:
    """Five taps of 20-40 N on the demo panel's driving point, at sub-sample times.

    Responses at B3 (acc1, the driving point), X1 (acc2) and D5; sensor noise 1e-3 N and
    1e-3 m/s² rms (about 100 dB below the peaks); exponential window to 0.01.
    """
    model = demo_panel()
    sensors = (DEMO_DRIVING_POINT, "X1", "D5")
    taps = anti_alias_taps(RATE_HZ, OVERSAMPLE)
    rng = np.random.default_rng(2024)
    windows = WindowSettings(exp_end_value=0.01)
    avg = SpectralAverager(len(sensors), BLOCK, RATE_HZ)
    tau = math.nan
    for _ in range(5):
        peak = rng.uniform(20.0, 40.0)
        # Pulse start such that the 5 N trigger level is crossed just before sample PRETRIGGER.
        rise = PULSE_S / math.pi * math.asin(5.0 / peak)
        t0 = (PRETRIGGER - rng.uniform(0.0, 1.0)) / RATE_HZ - rise
        rec = sampled_through_anti_alias(model, DEMO_DRIVING_POINT, sensors, t0, peak, taps)
        rec[0] += rng.normal(0.0, 1e-3, BLOCK)
        rec[1:] += rng.normal(0.0, 1e-3, (len(sensors), BLOCK))
        pulse_end = math.ceil((t0 + PULSE_S) * RATE_HZ)
        spectra = hit_spectra(rec, 0, (1, 2, 3), PRETRIGGER, pulse_end, RATE_HZ, windows)
        avg.add(spectra)
        tau = spectra.tau_s
    return model, avg, tau, sensors


def test_h1_matches_analytic_accelerance_of_the_panel(
    panel_point: tuple[ModalModel, SpectralAverager, float, tuple[str, ...]],
) -> None:
    """|H1| within 2 % of the analytic accelerance wherever γ² > 0.95 in [f1/2, 0.8 fN].

    Source: the closed-form accelerance of the viscously damped modal model seen through
    the exponential window, H(ω - i/tau) (firmware_protocol/simpiece/response.py, derived
    there; modal superposition as in Ewins, Modal Testing, 2nd ed., 2000, ch. 2, from
    memory). The window starts at the trigger, not at the pulse start t0: its factor
    exp(-(t0 - t_trig)/tau) is common to force and response and cancels in H1, as does
    the time origin of the record.
    """
    model, avg, tau, sensors = panel_point
    freq = avg.freq_hz
    band = (freq >= 0.5 * model.freqs_hz[0]) & (freq <= 0.8 * 0.5 * RATE_HZ)
    h1 = avg.h1()
    coh = avg.coherence()
    for row, point in enumerate(sensors):
        exact = accelerance(model, DEMO_DRIVING_POINT, point, freq, exp_decay_per_s(tau))
        error = np.abs(np.abs(h1[row]) / np.abs(exact) - 1.0)
        judged = band & (coh[row] > 0.95)
        assert judged.sum() > 0.95 * band.sum(), point
        worst = int(np.argmax(np.where(judged, error, 0.0)))
        assert error[worst] <= 0.02, f"{point}: {error[worst]:.4f} at {freq[worst]} Hz"


def test_h1_peaks_at_the_natural_frequencies(
    panel_point: tuple[ModalModel, SpectralAverager, float, tuple[str, ...]],
) -> None:
    """Peaks of the driving-point |H1| lie within one line of the model's frequencies.

    Source: the modal model's natural frequencies (Kirchhoff plate, Leissa, Vibration of
    Plates, NASA SP-160, 1969, as the demo panel uses them). Only modes that are excited
    at the driving point (φ² ≥ 0.3 kg⁻¹) and separated from every other mode by at least
    five half-power bandwidths 2ζf + 1/(π·tau) are judged.
    """
    model, avg, tau, _ = panel_point
    freq = avg.freq_hz
    line = freq[1]
    mag = np.abs(avg.h1()[0])
    f_n = model.freqs_hz
    bandwidth = 2.0 * model.damping_ratio * f_n + exp_decay_per_s(tau) / np.pi
    weight = model.shape_at(DEMO_DRIVING_POINT) ** 2
    judged = 0
    for r in range(model.n_modes):
        gap = float(np.min(np.abs(np.delete(f_n, r) - f_n[r])))
        if gap < 5.0 * bandwidth[r] or weight[r] < 0.3:
            continue
        near = np.abs(freq - f_n[r]) < 0.5 * gap
        peak = freq[int(np.argmax(np.where(near, mag, 0.0)))]
        assert abs(peak - f_n[r]) <= line, f"mode {r}: peak {peak} Hz, model {f_n[r]:.2f} Hz"
        judged += 1
    assert judged >= 2


# --------------------------------------------------------------------------------------
# Half-power bandwidth of an isolated mode
# --------------------------------------------------------------------------------------


def half_power_q(freq: FloatArray, frf: NDArray[np.complex128]) -> tuple[float, float]:
    """(Q, centre Hz) from the half-power points of |frf|², interpolated between lines."""
    power = np.abs(frf) ** 2
    k = int(np.argmax(power))
    half = 0.5 * power[k]
    left = k - int(np.argmax(power[k::-1] < half))  # last line below half power, left
    right = k + int(np.argmax(power[k:] < half))  # first line below half power, right
    f_lo = np.interp(half, power[left : left + 2], freq[left : left + 2])
    f_hi = np.interp(half, power[right - 1 : right + 1][::-1], freq[right - 1 : right + 1][::-1])
    centre = 0.5 * (f_lo + f_hi)
    return float(centre / (f_hi - f_lo)), float(centre)


@pytest.mark.parametrize("end_value", [None, 0.01])
def test_half_power_bandwidth_gives_q(end_value: float | None) -> None:
    """Q = f_n/Δf of the averaged H1 within 3 % of 1/(2ζ) (window share removed).

    Source: half-power bandwidth of a single-degree-of-freedom resonance, Q = 1/(2ζ)
    (Ewins, Modal Testing: Theory, Practice and Application, 2nd ed., 2000, ch. 4, from
    memory). One mode (f_n 203.7 Hz, ζ 1 %), records long enough to decay (4 s at
    4096 Hz); with the exponential window ζ_true = ζ_measured - 1/(ω·tau).
    """
    f_n, zeta = 203.7, 0.01
    model = ModalModel(
        labels=("P",), coords=np.zeros((1, 3)), freqs_hz=np.array([f_n]),
        damping_ratio=np.array([zeta]), shapes=np.array([[0.9]]), sensors={"acc": "P"},
    )  # fmt: skip
    rate, block, pre, width = 4096.0, 16384, 64, 0.002
    t = np.arange(block) / rate
    rng = np.random.default_rng(17)
    windows = WindowSettings(exp_end_value=end_value)
    avg = SpectralAverager(1, block, rate)
    tau = math.inf
    for _ in range(5):
        peak = rng.uniform(20.0, 40.0)
        t0 = (pre - rng.uniform(0.0, 1.0)) / rate - width / math.pi * math.asin(5.0 / peak)
        rec = np.vstack([
            half_sine(t - t0, width, peak) + rng.normal(0.0, 1e-3, block),
            modal_acceleration(model, "P", t, t0, width, peak) + rng.normal(0.0, 1e-3, block),
        ])  # fmt: skip
        spectra = hit_spectra(rec, 0, (1,), pre, math.ceil((t0 + width) * rate), rate, windows)
        avg.add(spectra)
        tau = spectra.tau_s
    q_seen, centre = half_power_q(avg.freq_hz, avg.h1()[0])
    zeta_true = corrected_damping_ratio(1.0 / (2.0 * q_seen), centre, tau)
    assert 1.0 / (2.0 * zeta_true) == pytest.approx(1.0 / (2.0 * zeta), rel=0.03)
    assert centre == pytest.approx(f_n, abs=avg.freq_hz[1])
    if end_value is not None:
        # The window's share is larger than the tolerance, so the correction is tested.
        assert abs(q_seen * 2.0 * zeta - 1.0) > 0.05
