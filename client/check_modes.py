"""What the modal fit adds to the quick-look check: peaks that hold more than one mode.

A peak of the summed |H1| (client/check/) can hide several modes: a close pair, or a
repeated root (two modes at one frequency). The check fits the test (client/modal/, pLSCF
and LSFD) and gives each fitted mode to the nearest peak when it lies within 1.5 of the
peak's half-power bandwidths (window included; two lines when the peak has none) of it; a
peak given two or more modes is listed. A fitted mode near no peak counts as unseen by the
peak picker. With one reference the fit cannot tell a repeated root from a single mode,
and the check says so.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from .dataset import TestData
from .errors import FitError

__all__ = ["FittedView", "fitted_view"]


@dataclass(frozen=True, slots=True)
class FittedView:
    """n_modes fitted in the band; merged: (peak Hz, (mode Hz, ...)) for each peak holding
    two or more modes; unseen: fitted modes (Hz) near no peak; notes: sentences."""

    n_modes: int
    merged: tuple[tuple[float, tuple[float, ...]], ...]
    unseen: tuple[float, ...]
    notes: tuple[str, ...]


def fitted_view(
    data: TestData,
    band: tuple[float, float],
    peaks_hz: Sequence[float],
    widths_hz: Sequence[float],
) -> FittedView:
    """Fit the test in `band` and set its modes against the check's peaks (module docstring).

    peaks_hz, widths_hz: each peak's frequency and half-power bandwidth (NaN: unresolved), Hz.
    """
    from .modal import fit

    try:
        model = fit(data, band=band)
    except FitError as exc:
        return FittedView(0, (), (), (f"no modal fit: {exc}",))
    line = float(np.median(np.diff(data.freq_hz))) if data.freq_hz.size > 1 else 1.0
    peaks = np.asarray(peaks_hz, dtype=np.float64)
    reach = np.array([1.5 * w if math.isfinite(w) else 2.0 * line for w in widths_hz])
    given: dict[int, list[float]] = {}
    unseen = []
    for f in model.freq_hz.tolist():
        if peaks.size == 0:
            unseen.append(f)
            continue
        k = int(np.argmin(np.abs(peaks - f)))
        if abs(peaks[k] - f) <= max(reach[k], 2.0 * line):
            given.setdefault(k, []).append(f)
        else:
            unseen.append(f)
    merged = tuple((float(peaks[k]), tuple(fs)) for k, fs in sorted(given.items()) if len(fs) > 1)
    notes = tuple(model.meta.get("notes", []))
    return FittedView(model.n_modes, merged, tuple(unseen), notes)


def report_lines(view: FittedView, n_peaks: int) -> list[str]:
    """The check report's section on the fitted modes."""
    lines = [f"fitted modes (pLSCF + LSFD; `taprig fit` gives the table): {view.n_modes} in "
             f"the band against {n_peaks} peaks"]  # fmt: skip
    for peak, modes in view.merged:
        hz = ", ".join(f"{f:.1f}" for f in modes)
        lines.append(f"  the peak at {peak:.1f} Hz holds {len(modes)} modes: {hz} Hz")
    if view.unseen:
        lines.append("  modes without a peak of their own: "
                     + ", ".join(f"{f:.1f}" for f in view.unseen) + " Hz")  # fmt: skip
    lines += [f"  note: {n}" for n in view.notes]
    return lines
