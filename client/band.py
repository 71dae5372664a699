"""The analysis band of a test: where the hammer's force carries enough energy to measure.

Shared by the quick-look check (client/check/) and the modal fit (client/modal/fit.py),
so that both judge the same lines. The rule is common practice in impact testing: a tap
excites the structure usefully up to where the force autospectrum Gff has fallen about
10 dB below its low-frequency level.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

FloatArray = NDArray[np.float64]


def force_band_tops(
    freq_hz: FloatArray, gff: FloatArray, drop_db: float = 10.0, low_fraction: float = 0.02
) -> FloatArray:
    """Top of each row's usable force band, Hz, shape (P,) for gff of shape (P, F).

    The band ends at the last line before Gff first falls `drop_db` below its
    low-frequency level (the median over the lowest `low_fraction` of the lines above
    0 Hz, at least 4 lines); a row that never falls that far keeps every line.
    """
    g = np.atleast_2d(np.asarray(gff, dtype=np.float64))
    n_low = max(4, round(low_fraction * (freq_hz.size - 1)))
    level = np.median(g[:, 1 : 1 + n_low], axis=1)
    below = g < (level * 10.0 ** (-drop_db / 10.0))[:, None]
    below[:, : 1 + n_low] = False  # the level's own lines never end the band
    first = np.where(below.any(axis=1), np.argmax(below, axis=1), freq_hz.size)
    tops: FloatArray = freq_hz[np.maximum(first - 1, 0)]
    return tops


def band_of(
    freq_hz: FloatArray,
    gff: FloatArray,
    band_hz: tuple[float, float] | None = None,
    drop_db: float = 10.0,
    low_fraction: float = 0.02,
    tops: FloatArray | None = None,
) -> tuple[float, float]:
    """The analysis band (F1, F2), Hz: `band_hz` when given, else from the first line above
    0 Hz to the median of the points' force-band tops (`tops`, computed when not given)."""
    if band_hz is not None:
        return (float(band_hz[0]), float(band_hz[1]))
    if tops is None:
        tops = force_band_tops(freq_hz, gff, drop_db, low_fraction)
    return (float(freq_hz[1]) if freq_hz.size > 1 else 0.0, float(np.median(tops)))
