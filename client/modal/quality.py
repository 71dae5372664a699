"""Evidence of a modal model's quality: MAC, MPC, synthesis error, participation, flags.

References:
    R. J. Allemang, D. L. Brown, "A correlation coefficient for modal vector analysis",
    Proc. 1st IMAC, 1982 (modal assurance criterion, MAC).
    R. S. Pappa, K. B. Elliott, A. Schenk, "Consistent-mode indicator for the eigensystem
    realization algorithm", J. Guidance, Control and Dynamics 16(5), 1993 (modal phase
    collinearity, MPC).

Flags (codes, each rule with its setting in `QualitySettings`):

* ``synthesis_error``: the synthesized FRFs miss the measured ones by more than
  ``max_synthesis_error`` (relative, over all points and references, within two half-power
  bandwidths of the mode);
* ``collinear``: MAC with another mode's shape of at least ``max_mac`` (the points cannot
  tell the two shapes apart: too coarse a grid, or spatial aliasing);
* ``window_damping``: the exponential window's decay rate 1/τ is more than
  ``window_share`` of the fitted decay rate: the damping left after removing it rests on
  a small difference;
* ``band_edge``: the natural frequency lies within ``edge_widths`` half-power bandwidths
  (window included) of an end of the band, where its neighbours outside are not modelled;
* ``single_reference``: the test has one reference, so a repeated root (two modes at one
  frequency) would show as this one mode: its residue matrix has one column, rank 1.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

__all__ = [
    "QualitySettings",
    "flags",
    "mac",
    "mpc",
    "participation_share",
    "synthesis_error_per_mode",
    "synthesis_error_per_point",
]

FloatArray = NDArray[np.float64]
ComplexArray = NDArray[np.complex128]


@dataclass(frozen=True, slots=True)
class QualitySettings:
    """Flag thresholds (see the module docstring)."""

    max_synthesis_error: float = 0.2
    max_mac: float = 0.9
    window_share: float = 0.5
    edge_widths: float = 2.0


def mac(a: ComplexArray, b: ComplexArray) -> FloatArray:
    """Modal assurance criterion of every row of `a` (M, P) with every row of `b` (N, P).

    Notes
    -----
    MAC(φ, ψ) = |φ^H ψ|² / ((φ^H φ)(ψ^H ψ)) (Allemang & Brown 1982). Returns (M, N) in
    [0, 1]; a zero vector gives 0.
    """
    a = np.atleast_2d(a)
    b = np.atleast_2d(b)
    cross = np.abs(np.conj(a) @ b.T) ** 2
    na = np.sum(np.abs(a) ** 2, axis=1)
    nb = np.sum(np.abs(b) ** 2, axis=1)
    den = np.outer(na, nb)
    out: FloatArray = np.divide(cross, den, out=np.zeros_like(cross), where=den > 0)
    return out


def mpc(shape: ComplexArray) -> FloatArray:
    """Modal phase collinearity of each row of `shape` (M, P), (M,) in [0, 1].

    Notes
    -----
    With φ = a + ib, S_xx = a·a, S_yy = b·b, S_xy = a·b, MPC is ((λ1 − λ2)/(λ1 + λ2))²
    for the eigenvalues λ1 >= λ2 of [[S_xx, S_xy], [S_xy, S_yy]]: 1 when all entries lie
    on one line in the complex plane (a real mode, any phase), 0 for a circle (Pappa,
    Elliott & Schenk 1993, their eigenvalue form of the indicator). Computed in closed
    form: (λ1 − λ2)² = (S_xx − S_yy)² + 4 S_xy².
    """
    s = np.atleast_2d(shape)
    sxx = np.sum(s.real**2, axis=1)
    syy = np.sum(s.imag**2, axis=1)
    sxy = np.sum(s.real * s.imag, axis=1)
    total = sxx + syy
    out: FloatArray = np.divide(
        (sxx - syy) ** 2 + 4.0 * sxy**2, total**2, out=np.zeros_like(total), where=total > 0
    )
    return out


def synthesis_error_per_point(measured: ComplexArray, synthesized: ComplexArray) -> FloatArray:
    """‖A − Â‖ / ‖A‖ per output over references and lines, (P,) for (P, R, F) inputs."""
    num = np.sqrt(np.sum(np.abs(measured - synthesized) ** 2, axis=(1, 2)))
    den = np.sqrt(np.sum(np.abs(measured) ** 2, axis=(1, 2)))
    out: FloatArray = np.divide(num, den, out=np.full_like(num, np.inf), where=den > 0)
    return out


def half_power_width_hz(pole_fitted: ComplexArray) -> FloatArray:
    """Half-power bandwidth of each fitted pole (window included), 2σ/2π Hz."""
    out: FloatArray = -2.0 * pole_fitted.real / (2.0 * math.pi)
    return out


def synthesis_error_per_mode(
    freq_hz: FloatArray,
    measured: ComplexArray,
    synthesized: ComplexArray,
    pole_fitted: ComplexArray,
) -> FloatArray:
    """Relative synthesis error within two half-power bandwidths of each mode, (M,).

    freq_hz (F,), measured and synthesized (P, R, F), pole_fitted (M,) rad/s. A mode with
    no line in its neighbourhood takes the nearest line.
    """
    err = np.abs(measured - synthesized) ** 2
    ref = np.abs(measured) ** 2
    per_line_err = err.sum(axis=(0, 1))
    per_line_ref = ref.sum(axis=(0, 1))
    centre = np.abs(pole_fitted) / (2.0 * math.pi)
    width = np.maximum(half_power_width_hz(pole_fitted), freq_hz[1] - freq_hz[0])
    near = np.abs(freq_hz[None, :] - centre[:, None]) <= 2.0 * width[:, None]  # (M, F)
    nearest = np.argmin(np.abs(freq_hz[None, :] - centre[:, None]), axis=1)
    near[np.arange(centre.size), nearest] = True
    num = np.sqrt(near.astype(np.float64) @ per_line_err)
    den = np.sqrt(near.astype(np.float64) @ per_line_ref)
    out: FloatArray = np.divide(num, den, out=np.full_like(num, np.inf), where=den > 0)
    return out


def participation_share(participation: ComplexArray) -> FloatArray:
    """Each reference's share of a mode's participation, |l_r|² / Σ|l|², (M, R)."""
    p = np.abs(np.atleast_2d(participation)) ** 2
    total = p.sum(axis=1, keepdims=True)
    out: FloatArray = np.divide(p, total, out=np.zeros_like(p), where=total > 0)
    return out


def flags(
    *,
    auto_mac: FloatArray,
    synthesis_error: FloatArray,
    pole_fitted: ComplexArray,
    decay_per_s: float,
    band_hz: tuple[float, float],
    n_ref: int,
    settings: QualitySettings,
) -> tuple[tuple[str, ...], ...]:
    """The flag codes of each mode (see the module docstring); (M,) tuples."""
    n = synthesis_error.size
    others = auto_mac - np.eye(n) if n else auto_mac
    sigma_fit = -pole_fitted.real
    f = np.abs(pole_fitted) / (2.0 * math.pi)
    width = half_power_width_hz(pole_fitted)
    out = []
    for k in range(n):
        found = []
        if synthesis_error[k] > settings.max_synthesis_error:
            found.append("synthesis_error")
        if n > 1 and float(np.max(others[k])) >= settings.max_mac:
            found.append("collinear")
        if decay_per_s > settings.window_share * sigma_fit[k]:
            found.append("window_damping")
        edge = settings.edge_widths * width[k]
        if f[k] - band_hz[0] <= edge or band_hz[1] - f[k] <= edge:
            found.append("band_edge")
        if n_ref == 1:
            found.append("single_reference")
        out.append(tuple(found))
    return tuple(out)
