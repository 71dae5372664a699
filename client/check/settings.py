"""The quick-look check's settings: its thresholds, checked when made.

The rules they set are in the modules that apply them: points.py (the flags and the force
band), peaks.py (the peak rule), mode_peaks.py (Q and the window's share), driving.py (the
phase rise at a driving point).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["CheckSettings"]


@dataclass(frozen=True, slots=True)
class CheckSettings:
    """The check's thresholds (units beside each); the module docstring says where each rule is.

    band_hz: analysis band (F1, F2), Hz; None: first line above 0 Hz to the median of the
    points' force-band tops. force_drop_db: dB below Gff's low-frequency level that ends
    the force band. low_fraction: share of the lines that sets that level.
    min_coherence, min_averages, band_share: the flag thresholds. min_prominence_db,
    floor_db: the peak rule, dB of |H|. min_rise_deg: the phase rise, degrees, that marks
    an anti-resonance at a driving point.
    """

    band_hz: tuple[float, float] | None = None
    force_drop_db: float = 10.0
    low_fraction: float = 0.02
    min_coherence: float = 0.9
    min_averages: int | None = None  # None: the test's planned averages (3 if unknown)
    band_share: float = 0.9
    min_prominence_db: float = 6.0
    floor_db: float = 40.0
    min_rise_deg: float = 30.0
    fit_modes: bool = True  # also fit the modes (client/check_modes.py)

    def __post_init__(self) -> None:
        if not 0.0 < self.force_drop_db <= 60.0:
            raise ValueError(f"force_drop_db {self.force_drop_db!r}; allowed 0 < dB <= 60")
        if not 0.0 < self.low_fraction < 0.5:
            raise ValueError(f"low_fraction {self.low_fraction!r}; allowed 0 < x < 0.5")
        if not 0.0 <= self.min_coherence <= 1.0:
            raise ValueError(f"min_coherence {self.min_coherence!r}; allowed 0..1")
        if not 0.0 < self.band_share <= 1.0:
            raise ValueError(f"band_share {self.band_share!r}; allowed 0 < x <= 1")
        if not self.min_prominence_db > 3.0103:
            # Below 3 dB a peak need not reach its half-power level on either side.
            raise ValueError(f"min_prominence_db {self.min_prominence_db!r}; must exceed 3 dB")
        if not self.floor_db > 0.0:
            raise ValueError(f"floor_db {self.floor_db!r}; must be > 0")
        if self.band_hz is not None:
            f1, f2 = self.band_hz
            if not (math.isfinite(f1) and math.isfinite(f2) and 0.0 <= f1 < f2):
                raise ValueError(f"band {f1!r}:{f2!r} Hz: need finite 0 <= F1 < F2")
