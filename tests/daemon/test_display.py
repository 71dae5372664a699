"""Decimation for display keeps every peak (min/max envelopes, bucket maxima)."""

from __future__ import annotations

import numpy as np
from scipy.optimize import brentq

from taprig.daemon.display import bucket_spectrum, envelope, force_zoom, last_hit_view

RATE = 51_200.0  # Hz
BLOCK = 8192


def half_sine(start: int, width: int, peak: float = 100.0) -> np.ndarray:
    k = np.arange(BLOCK)
    on = (k >= start) & (k < start + width)
    return np.where(on, peak * np.sin(np.pi * (k - start + 0.5) / width), 0.0)


def test_envelope_keeps_extremes_of_every_bucket() -> None:
    """Compared with a plain reshape-and-reduce of the same buckets (numpy as reference)."""
    rng = np.random.default_rng(3)
    x = rng.normal(size=(3, 16384))
    x[1, 12345] = 50.0  # a single-sample spike must survive
    lo, hi = envelope(x, 256)
    np.testing.assert_array_equal(hi, x.reshape(3, 256, 64).max(axis=2))
    np.testing.assert_array_equal(lo, x.reshape(3, 256, 64).min(axis=2))
    assert hi[1].max() == 50.0


def test_bucket_spectrum_max_and_min() -> None:
    f = np.arange(8193) * 3.125
    v = np.abs(np.sin(f / 100.0))[None, :]
    fb, mx = bucket_spectrum(f, v, 512, "max")
    _, mn = bucket_spectrum(f, v, 512, "min")
    assert fb.size == mx.shape[1] == 512 and fb[0] == 0.0
    assert np.all(mx >= mn) and mx.max() == v.max()


def test_spectra_span_the_force_band_of_a_half_sine_tap() -> None:
    """A half-sine pulse of length T has |F(f)| ∝ |cos(πfT) / (1 − 4f²T²)| (its Fourier
    transform; a standard result, e.g. Harris & Piersol, "Harris' Shock and Vibration
    Handbook", 5th ed., 2002, ch. 23; chapter from memory). Its energy falls 10 dB below the
    0 Hz level at the root of |F(f)/F(0)|² = 0.1, found here with scipy.optimize.brentq; the
    band the view is cut to ends there."""
    width = 32  # samples: T = 0.625 ms
    t = width / RATE
    force = half_sine(100, width)
    spectrum = np.fft.rfft(force)
    freq = np.fft.rfftfreq(BLOCK, 1.0 / RATE)
    gff = np.abs(spectrum) ** 2
    h1 = np.ones((1, freq.size), dtype=complex)
    coh = np.ones((1, freq.size))
    data = np.vstack([force, force])
    view = last_hit_view(data, RATE, 0, ("hammer", "acc"), freq, h1, coh, gff)

    def ratio(f: float) -> float:
        return float((np.cos(np.pi * f * t) / (1 - 4 * f**2 * t**2)) ** 2 - 0.1)

    want = brentq(ratio, 0.6 / t, 1.49 / t)  # before the first zero, at 1.5/T
    lo, top = view["band_hz"]
    # Within 1 %: the level is the median of the lowest lines (a little under F(0)), and the
    # pulse is sampled (32 samples), not continuous.
    assert lo == freq[1] and abs(top - want) <= 0.01 * want, (top, want)
    shown = view["spectra"]["freq_hz"]
    assert shown[0] >= lo and shown[-1] <= top and len(shown) >= 100


def test_force_zoom_shows_both_pulses_of_a_double_hit() -> None:
    """A double hit (two 0.6 ms pulses 4 ms apart in a 160 ms record): the zoomed trace covers
    both and little else, and its maxima cross half the peak twice: two pulses, plainly."""
    force = half_sine(500, 32) + half_sine(500 + 205, 32, peak=60.0)
    zoom = force_zoom(force, RATE)
    assert zoom is not None
    assert zoom["start_s"] <= 500 / RATE and zoom["end_s"] >= (500 + 205 + 32) / RATE
    assert zoom["end_s"] - zoom["start_s"] < 0.01  # 10 ms of a 160 ms record
    hi = np.asarray(zoom["max"])
    above = hi > 0.25 * hi.max()
    rises = int(np.count_nonzero(above[1:] & ~above[:-1])) + int(above[0])
    assert rises == 2
    assert force_zoom(np.zeros(BLOCK), RATE) is None
