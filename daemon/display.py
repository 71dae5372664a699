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
# The force band ends where Gff first falls this far below its low-frequency level, the
# median over the lowest LOW_SHARE of the lines above 0 Hz (at least 4 lines): the same rule
# as the workstation's quick-look check (client/check/), so the phone shows the band the
# check will judge. Judging an FRF only within 10 to 20 dB of the hammer's low-frequency
# level is common practice; 10 dB is the stricter end.
FORCE_DROP_DB = 10.0
LOW_SHARE = 0.02
# The force trace is zoomed on the pulses: from the first to the last sample above this share
# of the peak, with a pulse's length (at least PAD_S) on each side.
PULSE_LEVEL = 0.05
PAD_S = 0.001  # s


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


def force_band(freq_hz: np.ndarray, gff: np.ndarray) -> tuple[float, float]:
    """(first line above 0 Hz, top of the force band), Hz, of a force autospectrum (n_freq,).

    The band ends at the last line before Gff first falls FORCE_DROP_DB below its
    low-frequency level; a spectrum that never falls that far keeps every line.
    """
    n_low = max(4, round(LOW_SHARE * (freq_hz.size - 1)))
    level = float(np.median(gff[1 : 1 + n_low]))
    below = gff < level * 10.0 ** (-FORCE_DROP_DB / 10.0)
    below[: 1 + n_low] = False  # the level's own lines never end the band
    first = int(np.argmax(below)) if below.any() else freq_hz.size
    return float(freq_hz[min(1, freq_hz.size - 1)]), float(freq_hz[max(first - 1, 1)])


def force_zoom(force: np.ndarray, rate_hz: float) -> dict[str, Any] | None:
    """The force trace (block,) N, around its pulses: {"start_s", "end_s", "min", "max"}
    (seconds from the record's start; envelopes as `envelope`). None without any force.

    Every sample above PULSE_LEVEL of the peak is inside, so a double hit shows both pulses.
    """
    size = np.abs(force)
    peak = float(size.max()) if size.size else 0.0
    if not peak > 0.0:
        return None
    above = np.flatnonzero(size >= PULSE_LEVEL * peak)
    first, last = int(above[0]), int(above[-1])
    width = int(np.flatnonzero(size[first:] < PULSE_LEVEL * peak)[:1].sum()) or 1
    pad = max(width, round(PAD_S * rate_hz))
    a, b = max(0, first - pad), min(force.size, last + pad + 1)
    lo, hi = envelope(force[a:b])
    return {"start_s": a / rate_hz, "end_s": b / rate_hz, "min": lo.tolist(), "max": hi.tolist()}


def last_hit_view(
    record_data: np.ndarray,
    rate_hz: float,
    first_index: int,
    labels: tuple[str, ...],
    freq_hz: np.ndarray | None,
    h1: np.ndarray | None,
    coherence: np.ndarray | None,
    gff: np.ndarray | None = None,
    force: int = 0,
) -> dict[str, Any]:
    """JSON-ready view of one record (channels, block) in SI units and the point's FRF so far.

    h1, coherence: (n_resp, n_freq) of the current point's running average, or None before
    the first accepted average; gff: (n_freq,) its force autospectrum, which sets the band
    the spectra are cut to ("band_hz"; all lines when None). force: the force channel's row.
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
    view["force_zoom"] = force_zoom(record_data[force], rate_hz)
    if freq_hz is not None and h1 is not None and coherence is not None:
        band = force_band(freq_hz, gff) if gff is not None else (0.0, float(freq_hz[-1]))
        keep = (freq_hz >= band[0]) & (freq_hz <= band[1])
        freq_hz, h1, coherence = freq_hz[keep], h1[:, keep], coherence[:, keep]
        view["band_hz"] = list(band)
        with np.errstate(invalid="ignore"):
            f, mag = bucket_spectrum(freq_hz, np.abs(h1), SPECTRUM_POINTS, "max")
            _, coh = bucket_spectrum(freq_hz, coherence, SPECTRUM_POINTS, "min")
        view["spectra"] = {
            "freq_hz": f.tolist(),
            "h1_abs": np.where(np.isfinite(mag), mag, 0.0).tolist(),
            "coherence": np.where(np.isfinite(coh), coh, 0.0).tolist(),
        }
    return view
