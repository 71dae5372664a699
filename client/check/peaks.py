"""Peak picking on a positive spectrum: prominences, the peak rule, half-power widths.

The peak rule: lines higher than both neighbours whose prominence is at least
``min_prominence_db`` (6 dB) and that lie within ``floor_db`` (40 dB) of the highest value.
Prominence as scipy.signal.peak_prominences defines it: from the peak, go each way until the
signal is higher than the peak (or the band ends); the base on that side is the lowest value
on the way; the prominence is the peak over the higher base (here as a ratio, in dB).

Half power: near an isolated, lightly damped mode the curve follows a Lorentzian,
1/((f − f0)² + (ζf0)²) up to a factor, whose inverse is a parabola, a(f − f0)² + c, fitted
by least squares to the lines from the first below half the peak on the left to the first
on the right: the half-power crossings interpolated between lines along the curve the mode
follows. f0 is the natural frequency and Δf = 2·sqrt(c/a) the half-power bandwidth
(half-power method, Ewins 2000, §4.3, from memory). A peak whose half level is not reached
before a higher value has no width.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import NDArray

__all__ = ["FloatArray", "IntArray", "half_power", "peak_prominences", "pick_peaks", "uphill"]

FloatArray = NDArray[np.float64]
IntArray = NDArray[np.intp]


def peak_prominences(y: FloatArray, peaks: IntArray) -> tuple[FloatArray, FloatArray]:
    """Left and right bases of each peak (values of `y`), scipy.signal's definition.

    From the peak, go each way until `y` is strictly higher than the peak or the signal
    ends; the base is the lowest value on the way. Prominence = y[peak] − max(bases).
    """
    left = np.empty(peaks.size)
    right = np.empty(peaks.size)
    for n, p in enumerate(peaks.tolist()):
        top = y[p]
        before = y[:p][::-1]
        stop = np.flatnonzero(before > top)
        run = before[: stop[0] if stop.size else before.size]
        left[n] = min(top, float(run.min())) if run.size else top
        after = y[p + 1 :]
        stop = np.flatnonzero(after > top)
        run = after[: stop[0] if stop.size else after.size]
        right[n] = min(top, float(run.min())) if run.size else top
    return left, right


def pick_peaks(
    y: FloatArray, min_prominence_db: float = 6.0, floor_db: float = 40.0
) -> tuple[IntArray, FloatArray]:
    """Indices of the peaks of positive `y` by the module's rule, and their prominence, dB."""
    y = np.asarray(y, dtype=np.float64)
    if y.size < 3:
        return np.empty(0, dtype=np.intp), np.empty(0)
    inner = (y[1:-1] > y[:-2]) & (y[1:-1] >= y[2:])
    cand = np.flatnonzero(inner) + 1
    cand = cand[y[cand] >= y.max() * 10.0 ** (-floor_db / 20.0)]
    left, right = peak_prominences(y, cand)
    with np.errstate(divide="ignore"):
        prom_db = 20.0 * np.log10(y[cand] / np.maximum(left, right))
    keep = prom_db >= min_prominence_db
    return cand[keep].astype(np.intp), prom_db[keep]


def half_power(freq_hz: FloatArray, power: FloatArray, peak: int) -> tuple[float, float]:
    """(f0 Hz, half-power bandwidth Hz) of the peak of `power` at line `peak`; NaN if unresolved.

    `power`: a positive quantity that follows a single mode's Lorentzian near it, e.g. a
    squared magnitude or a quadrature (imaginary-part) sum. Fits a(f − f0)² + c to
    1/power over the lines from the first below half the peak on the left to the first
    below it on the right (see the module docstring); bandwidth 2·sqrt(c/a).
    """
    top = power[peak]
    level = 0.5 * top
    nan = (math.nan, math.nan)
    if not top > 0.0:
        return nan
    lo = np.flatnonzero(power[:peak][::-1] < level)
    hi = np.flatnonzero(power[peak + 1 :] < level)
    if not (lo.size and hi.size):
        return nan
    i0, i1 = peak - 1 - int(lo[0]), peak + 1 + int(hi[0])
    span = power[i0 : i1 + 1] / top  # scaled to 1 at the peak line for conditioning
    if np.any(span > 1.0) or np.any(span <= 0.0):
        return nan  # a higher value before the half-power level: not an isolated peak
    x = freq_hz[i0 : i1 + 1] - freq_hz[peak]
    a2, a1, a0 = np.polyfit(x, 1.0 / span, 2)
    if not a2 > 0.0:
        return nan
    shift = -a1 / (2.0 * a2)
    c = a0 - a2 * shift * shift
    if not (c > 0.0 and abs(shift) <= x[-1] - x[0]):
        return nan
    return float(freq_hz[peak] + shift), float(2.0 * math.sqrt(c / a2))


def uphill(y: FloatArray, i: int) -> int:
    """The local maximum of `y` reached by climbing from line `i`."""
    while True:
        if i + 1 < y.size and y[i + 1] > y[i]:
            i += 1
        elif i > 0 and y[i - 1] > y[i]:
            i -= 1
        else:
            return i
