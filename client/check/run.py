"""Running the check on one test: the analysis band, then points, modes, driving points.

Analysis band: ``settings.band_hz`` or, by default, from the first line above 0 Hz to the
median of the points' force-band tops (client/band.py's rule).
"""

from __future__ import annotations

import numpy as np

from ..band import band_of, force_band_tops
from ..check_modes import fitted_view
from ..dataset import TestData
from .driving import driving_point
from .mode_peaks import mode_peaks
from .peaks import FloatArray
from .points import point_check
from .results import CheckResult
from .settings import CheckSettings

__all__ = ["analysis_band", "check"]


def check(data: TestData, settings: CheckSettings | None = None) -> CheckResult:
    """Run the quick-look check on one test's data (see the module docstring)."""
    s = settings or CheckSettings()
    freq = data.freq_hz
    tops = force_band_tops(freq, data.gff, s.force_drop_db, s.low_fraction)
    band = analysis_band(data, s, tops)
    in_band = (freq >= band[0]) & (freq <= band[1])
    if in_band.sum() < 3:
        raise ValueError(
            f"band {band[0]!r}:{band[1]!r} Hz holds {int(in_band.sum())} frequency lines; "
            "the check needs at least 3"
        )
    lines = np.flatnonzero(in_band)
    lo, hi = int(lines[0]), int(lines[-1]) + 1
    point_checks = tuple(
        point_check(data, i, tops[i], in_band, band, s) for i in range(len(data.points))
    )
    modes = mode_peaks(data, lo, hi, s)
    driving = tuple(driving_point(data, row, r, lo, hi, s) for row, r in data.driving_point_rows())
    fitted = None
    if s.fit_modes:
        widths = [m.freq_hz / m.q_measured for m in modes]
        fitted = fitted_view(data, band, [m.freq_hz for m in modes], widths)
    return CheckResult(
        test=data.test,
        rig=data.rig,
        band_hz=band,
        exp_tau_s=data.exp_tau_s,
        points=data.points,
        coords=tuple((float(x), float(y), float(z)) for x, y, z in data.coords),
        responses=data.responses,
        point_checks=point_checks,
        modes=modes,
        driving_points=driving,
        settings=s,
        fitted=fitted,
        unmeasured=data.unmeasured,
        grid_points=len(data.grid),
        sensors_unplaced=tuple(data.meta.get("sensors_missing", ())),
    )


def analysis_band(
    data: TestData, settings: CheckSettings | None = None, tops: FloatArray | None = None
) -> tuple[float, float]:
    """The analysis band (F1, F2), Hz, with the check's settings (client/band.py's rule)."""
    s = settings or CheckSettings()
    return band_of(data.freq_hz, data.gff, s.band_hz, s.force_drop_db, s.low_fraction, tops)
