"""The per-point check (`PointCheck`): averages, rejections, coherence, force band, flags.

Per point:

* averages and rejections by reason, as measured;
* usable force band: from the lowest line up to the last line before the force
  autospectrum Gff first falls more than ``force_drop_db`` (default 10 dB) below its
  low-frequency level, the median of Gff over the lowest ``low_fraction`` (2 %) of the lines
  above 0 Hz (at least 4 lines). Judging an FRF only where the hammer put in energy within
  10 to 20 dB of its low-frequency level is common practice; 10 dB is the stricter end;
* mean coherence of each response over the analysis band, up to the point's force band;
* flags (the rules, each with its setting): ``few_averages``: fewer than ``min_averages``
  accepted hits (default: the averages the test asked for, 3 when unknown);
  ``low_coherence``: some response's mean coherence below ``min_coherence`` (0.9);
  ``narrow_force_band``: the force band ends below ``band_share`` (90 %) of the analysis
  band's top (tap again with a harder tip).
"""

from __future__ import annotations

import math

import numpy as np

from ..dataset import TestData
from .results import PointCheck
from .settings import CheckSettings

__all__ = ["point_check"]


def point_check(
    data: TestData,
    i: int,
    top_hz: float,
    in_band: np.ndarray,
    band: tuple[float, float],
    s: CheckSettings,
) -> PointCheck:
    judged = in_band & (data.freq_hz <= top_hz)
    if judged.any():
        coherence = tuple(float(v) for v in data.coherence[i][:, judged].mean(axis=1))
    else:
        coherence = tuple(math.nan for _ in data.responses)
    flags = []
    need = s.min_averages if s.min_averages is not None else (data.planned_averages or 3)
    if int(data.n_averages[i]) < need:
        flags.append("few_averages")
    if not judged.any() or min(coherence) < s.min_coherence:
        flags.append("low_coherence")
    if top_hz < s.band_share * band[1]:
        flags.append("narrow_force_band")
    return PointCheck(
        point=data.points[i],
        n_averages=int(data.n_averages[i]),
        rejections=dict(data.rejections[i]),
        mean_coherence=coherence,
        force_band_top_hz=float(top_hz),
        flags=tuple(flags),
    )
