"""The modes (`ModePeak`): peaks of the summed FRF, their Q and their deflection shapes.

From the summed FRF magnitude S(f) = Σ over points and responses |H1|:

* peaks: lines in the analysis band by the peak rule (peaks.py).
* natural frequency and half-power Q, from the quadrature sum Σ sign(Im H(f_p))·Im H(f)
  over points and responses (each FRF's imaginary part, signed to add up at the peak
  line f_p). Near an isolated, lightly damped mode both |H|² and Im H follow the same
  Lorentzian, 1/((f − f0)² + (ζf0)²) up to a factor (|ω_r² − ω² + 2iζω_rω|² ≈
  4ω_r²((ω − ω_r)² + ζ²ω_r²)), so the quadrature sum falls to half its peak at the
  half-power frequencies; but the other modes' imaginary parts die away as 1/Δf² from
  their resonances where their magnitudes die as 1/Δf, so the quadrature sum carries far
  less of the neighbours than Σ|H| (which widens every peak and biases Q low; quadrature
  peak picking, Ewins 2000, §4.3, from memory). The inverse of the Lorentzian is a
  parabola, a(f − f0)² + c, fitted by least squares to the lines from the first below half
  the peak on the left to the first on the right: the half-power crossings interpolated
  between lines along the curve the mode follows. f0 is the natural frequency,
  Δf = 2·sqrt(c/a) the half-power bandwidth and Q_measured = f0/Δf (half-power method,
  Ewins 2000, §4.3, from memory). A mode whose half level is not reached before a higher
  value has no Q.
* exponential window: the window exp(−t/τ) on force and response adds 1/τ to every
  mode's decay rate (daemon/spectra.py's docstring), so ζ = 1/(2 Q_measured) −
  1/(2π f0 τ) and Q = 1/(2ζ); when the window's share is all of the measured damping
  (ζ <= 0) the mode has no Q (a longer block or a gentler window resolves it).
* deflection shape: per response, Im H1 at the peak line over the points, scaled to a
  largest magnitude of 1. Near an isolated mode H(i, s) ≈ φ(i)φ(s)·g(ω), so Im H over
  the points is the mode shape scaled by the shape at the fixed sensor (roving hammer)
  or the fixed hammer point (roving sensor), by reciprocity. ``response`` names the
  response with the largest Im H at the peak, the one reported.
"""

from __future__ import annotations

import math

import numpy as np

from ..dataset import TestData
from .peaks import half_power, pick_peaks, uphill
from .results import ModePeak
from .settings import CheckSettings

__all__ = ["mode_peaks"]


def mode_peaks(data: TestData, lo: int, hi: int, s: CheckSettings) -> tuple[ModePeak, ...]:
    freq = data.freq_hz[lo:hi]
    summed = np.abs(data.h1[..., lo:hi]).sum(axis=(0, 1))
    peaks, prom = pick_peaks(summed, s.min_prominence_db, s.floor_db)
    imag = data.h1.imag[..., lo:hi]  # (P, R, F')
    out = []
    for p, prom_db in zip(peaks.tolist(), prom.tolist(), strict=True):
        at_peak = imag[:, :, p]  # (P, R)
        # The quadrature sum: every FRF's imaginary part, signed to add up at this peak.
        quadrature = np.einsum("pr,prf->f", np.sign(at_peak), imag)
        f0, width = half_power(freq, quadrature, uphill(quadrature, p))
        note = ""
        q_measured = f0 / width if width > 0.0 else math.nan
        if math.isnan(q_measured):
            note = "half-power points not resolved"
            f0 = float(freq[p])
        zeta = 0.5 / q_measured - 1.0 / (2.0 * math.pi * f0 * data.exp_tau_s)
        if not zeta > 0.0:
            if not note:
                note = "the exponential window's damping covers all of the measured damping"
            zeta = math.nan
        norms = np.linalg.norm(at_peak, axis=0)
        shapes = {}
        for r, label in enumerate(data.responses):
            column = at_peak[:, r]
            scale = float(np.max(np.abs(column)))
            shapes[label] = tuple(float(v) for v in (column / scale if scale > 0 else column))
        out.append(
            ModePeak(
                freq_hz=float(f0),
                line_hz=float(freq[p]),
                q_measured=float(q_measured),
                q=0.5 / zeta if zeta > 0.0 else math.nan,
                damping_ratio=float(zeta),
                prominence_db=float(prom_db),
                response=data.responses[int(np.argmax(norms))],
                shapes=shapes,
                note=note,
            )
        )
    return tuple(out)
