"""The last hit, made small enough for a phone to draw within a second of the tap.

Time traces become min/max envelopes (every peak survives decimation) and
spectra become per-bucket maxima (|H1|) and minima (γ², the cautious side),
so a display of a few hundred pixels shows what matters. Pure functions.
"""

from __future__ import annotations

from typing import Any

import numpy as np

TRACE_BUCKETS = 256  # min/max pairs per trace
SPECTRUM_POINTS = 512  # lines per spectrum


def envelope(x: np.ndarray, buckets: int = TRACE_BUCKETS) -> tuple[np.ndarray, np.ndarray]:
    """(min, max) of `x` over `buckets` equal spans; x itself when it is short already."""
    n = x.shape[-1]
    if n <= buckets:
        return x.copy(), x.copy()
    edges = np.linspace(0, n, buckets + 1).astype(int)
    return np.minimum.reduceat(x, edges[:-1], axis=-1), np.maximum.reduceat(x, edges[:-1], axis=-1)


def bucket_spectrum(
    freq: np.ndarray, values: np.ndarray, points: int, how: str
) -> tuple[np.ndarray, np.ndarray]:
    """(bucket start frequency, max or min of `values` per bucket) over the last axis."""
    n = freq.size
    if n <= points:
        return freq.copy(), values.copy()
    edges = np.linspace(0, n, points + 1).astype(int)[:-1]
    reduce = np.maximum if how == "max" else np.minimum
    return freq[edges], reduce.reduceat(values, edges, axis=-1)


def last_hit_view(
    record_data: np.ndarray,
    rate_hz: float,
    first_index: int,
    labels: tuple[str, ...],
    freq_hz: np.ndarray | None,
    h1: np.ndarray | None,
    coherence: np.ndarray | None,
) -> dict[str, Any]:
    """JSON-ready view of one record (channels, block) in SI units and the point's FRF so far.

    h1, coherence: (n_resp, n_freq) of the current point's running average, or None before
    the first accepted average.
    """
    lo, hi = envelope(record_data)
    view: dict[str, Any] = {
        "first_index": first_index,
        "rate_hz": rate_hz,
        "duration_s": record_data.shape[1] / rate_hz,
        "traces": {
            label: {"min": lo[i].tolist(), "max": hi[i].tolist()} for i, label in enumerate(labels)
        },
    }
    if freq_hz is not None and h1 is not None and coherence is not None:
        with np.errstate(invalid="ignore"):
            f, mag = bucket_spectrum(freq_hz, np.abs(h1), SPECTRUM_POINTS, "max")
            _, coh = bucket_spectrum(freq_hz, coherence, SPECTRUM_POINTS, "min")
        view["spectra"] = {
            "freq_hz": f.tolist(),
            "h1_abs": np.where(np.isfinite(mag), mag, 0.0).tolist(),
            "coherence": np.where(np.isfinite(coh), coh, 0.0).tolist(),
        }
    return view
