"""The driving-point check (`DrivingPointCheck`): does a driving point's FRF look like one?

A driving point is every (point, response) pair where the hammer struck the sensor's own
point. With numpy's forward FFT convention (e^{−iωt}) the accelerance of a lightly damped
mode at resonance is A ≈ +i·φ²/(2ζ), so at a driving point (φ(i) = φ(s)) Im A > 0 at every
resonance. Between two resonances an undamped driving point's receptance rises through zero
once (Foster's reactance theorem: R. M. Foster, "A reactance theorem", Bell System Technical
Journal 3, 1924): resonances and anti-resonances alternate. Through a resonance the phase of
A falls by about 180°; through an anti-resonance it climbs back. Damping (and the window's
share) can keep Re A from reaching zero at a shallow anti-resonance, but the phase still
climbs part of the way, so the rule is: between consecutive resonances the phase climbs by
at least ``min_rise_deg`` (30°) somewhere. At a cross point whose modal constants change
sign from one mode to the next there is no anti-resonance and the phase does not climb. The
check finds the driving-point FRF's own resonances (same peak rule, in the analysis band)
and lists the resonances with Im A <= 0 and the pairs with no anti-resonance between them (a
sensor off its point, a sign error, a swapped channel).
"""

from __future__ import annotations

import math

import numpy as np

from ..dataset import TestData
from .peaks import pick_peaks
from .results import DrivingPointCheck
from .settings import CheckSettings

__all__ = ["driving_point"]


def driving_point(
    data: TestData, row: int, r: int, lo: int, hi: int, s: CheckSettings
) -> DrivingPointCheck:
    h = data.h1[row, r, lo:hi]
    freq = data.freq_hz[lo:hi]
    peaks, _ = pick_peaks(np.abs(h), s.min_prominence_db, s.floor_db)
    wrong = tuple(float(freq[p]) for p in peaks if not h[p].imag > 0.0)
    phase = np.unwrap(np.angle(h))
    missing = []
    for a, b in zip(peaks[:-1].tolist(), peaks[1:].tolist(), strict=True):
        between = phase[a + 1 : b]
        # An anti-resonance: somewhere on the way the phase climbs by min_rise_deg.
        rise = between - np.minimum.accumulate(between) if between.size else between
        if not (rise.size and math.degrees(float(rise.max())) >= s.min_rise_deg):
            missing.append((float(freq[a]), float(freq[b])))
    return DrivingPointCheck(
        point=data.points[row],
        response=data.responses[r],
        resonances_hz=tuple(float(freq[p]) for p in peaks),
        wrong_sign_hz=wrong,
        no_antiresonance_hz=tuple(missing),
    )
