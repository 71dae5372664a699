"""Decimation for display keeps every peak (min/max envelopes, bucket maxima)."""

from __future__ import annotations

import numpy as np

from taprig.daemon.display import bucket_spectrum, envelope


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
