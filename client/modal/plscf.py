"""Poles by the polyreference least-squares complex frequency-domain estimator (pLSCF).

References:
    P. Guillaume, P. Verboven, S. Vanlanduit, H. Van der Auweraer, B. Peeters, "A
    poly-reference implementation of the least-squares complex frequency-domain estimator",
    Proc. IMAC XXI, 2003.
    B. Peeters, H. Van der Auweraer, P. Guillaume, J. Leuridan, "The PolyMAX frequency-domain
    method: a new standard for modal parameter estimation?", Shock and Vibration 11, 2004.
    J. S. Bendat, A. G. Piersol, Random Data, 4th ed., Wiley, 2010, §9.2 (random error of a
    frequency response function's gain estimate; the section from memory).

Model: a right matrix-fraction description of the FRF matrix, outputs o = 1..P (the grid
points) by inputs r = 1..R (the references), one row per output:

    H_o(ω) = B_o(ω) A(ω)^-1,  B_o(ω) = Σ_{j=0..N} Ω_j(ω) β_oj,  A(ω) = Σ_{j=0..n} Ω_j(ω) α_j

with β_oj real 1×R, α_j real R×R and the z-domain basis Ω_j(ω) = z^j, z = exp(iωΔt). The
exponent's sign follows numpy's forward FFT (e^{-iωt}), under which a decaying mode e^{λt}
has the transform 1/(iω − λ) and the discrete pole z = exp(λΔt) lies inside the unit
circle; a basis exp(−iωΔt j) belongs to the opposite transform convention.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

__all__ = [
    "PoleSet",
    "damping_of",
    "line_weights",
    "natural_freq_hz",
    "normal_matrix",
    "poles_at_order",
    "random_error",
]

FloatArray = NDArray[np.float64]
ComplexArray = NDArray[np.complex128]

#: Weights are clipped at this random error (relative error of |H|): a line of perfect
#: coherence then weighs as much as one with 1 % random error, not infinitely more.
ERROR_FLOOR = 0.01


@dataclass(frozen=True, slots=True)
class PoleSet:
    """The poles of one model order, each physical pole once (positive frequency).

    order: denominator order n. s: (K,) complex poles as fitted, rad/s (λ = −σ + iω_d).
    participation: (K, R) complex participation vectors, unit norm.
    """

    order: int
    s: ComplexArray
    participation: ComplexArray

    @property
    def freq_hz(self) -> FloatArray:
        return natural_freq_hz(self.s)

    @property
    def damping_ratio(self) -> FloatArray:
        return damping_of(self.s)


def natural_freq_hz(s: ComplexArray) -> FloatArray:
    """Undamped natural frequency |λ|/2π of poles λ (rad/s), Hz, same shape."""
    out: FloatArray = np.abs(s) / (2.0 * math.pi)
    return out


def damping_of(s: ComplexArray) -> FloatArray:
    """Damping ratio ζ = −Re λ / |λ| of poles λ, same shape."""
    out: FloatArray = -s.real / np.maximum(np.abs(s), 1e-300)
    return out


def random_error(coherence: FloatArray, n_averages: NDArray[np.int64]) -> FloatArray:
    """Normalised random error of the FRF gain estimate, (P, R, F) for coherence (P, R, F).

    Notes
    -----
    ε_r[|Ĥ|] = sqrt(1 − γ²) / (|γ| sqrt(2 n_d)), n_d the number of averages (Bendat &
    Piersol 2010, §9.2, from memory). γ² = 0 gives inf.
    """
    g2 = np.clip(np.asarray(coherence, dtype=np.float64), 0.0, 1.0)
    nd = np.asarray(n_averages, dtype=np.float64).reshape(-1, *([1] * (g2.ndim - 1)))
    with np.errstate(divide="ignore"):
        out: FloatArray = np.sqrt(1.0 - g2) / (np.sqrt(g2) * np.sqrt(2.0 * nd))
    return out


def line_weights(coherence: FloatArray, n_averages: NDArray[np.int64]) -> FloatArray:
    """Weight per output and line, (P, F): 1 / the references' rms random error, clipped.

    Notes
    -----
    W_o(ω_f) = 1 / max(ε̄_o(ω_f), ERROR_FLOOR), ε̄ the root mean square over references of
    `random_error`. A weight per output and line (not per reference) keeps the model's
    row structure, so the reduced normal equations stay per output.
    """
    eps = random_error(coherence, n_averages)
    rms = np.sqrt(np.mean(eps**2, axis=1))
    out: FloatArray = 1.0 / np.maximum(rms, ERROR_FLOOR)
    return out


def normal_matrix(
    h: ComplexArray, omega_dt: FloatArray, weight: FloatArray, order: int
) -> FloatArray:
    """Reduced normal matrix M of the pLSCF problem at the top order N, (R(N+1), R(N+1)).

    Parameters
    ----------
    h : (P, R, F) complex
        FRFs, outputs by references by lines (any consistent unit; scaled here).
    omega_dt : (F,) float
        ωΔt of each line, rad (in [0, π] for a band below the Nyquist frequency of Δt).
    weight : (P, F) float
        Weight per output and line.
    order : int
        Top model order N.

    Returns
    -------
    M : (R(N+1), R(N+1)) float, symmetric; rows and columns ordered (j, r), j major.

    Notes
    -----
    Per output o the weighted equation error at line f is
    W_o(f) (B_o(ω_f) − H_o(ω_f) A(ω_f)) = X_o(f) β_o + Y_o(f) α with
    X_o(f) = W_o(f) [Ω_0 … Ω_N] and Y_o(f) = −W_o(f) [Ω_0 H_o … Ω_N H_o]. The normal
    equations' blocks R_o = Re(X_o^H X_o), S_o = Re(X_o^H Y_o), T_o = Re(Y_o^H Y_o) depend
    on the basis only through z^{k−j}, so each is Toeplitz in (j, k) and built from the
    weighted moments Σ_f W² e^{iω_fΔt d}, Σ_f W² H_b e^{iω_fΔt d} and
    Σ_f W² conj(H_a) H_b e^{iω_fΔt d}, d = −N..N: a cost of P·R²·F·(2N+1), one matrix
    product. Eliminating β_o = −R_o^-1 S_o α gives the reduced normal equations
    M α = 0, M = 2 Σ_o (T_o − S_o^T R_o^-1 S_o) (Guillaume et al. 2003; Peeters et al. 2004).
    The leading R(n+1) block of M is the reduced matrix of a model with denominator order
    n and numerator order N, which is what a stabilization diagram solves at each order.
    """
    n_out, n_ref, _ = h.shape
    scale = float(np.sqrt(np.mean(np.abs(h) ** 2))) or 1.0
    hn = h / scale
    lags = np.arange(-order, order + 1)
    basis = np.exp(1j * np.outer(omega_dt, lags))  # (F, 2N+1)
    w2 = weight**2  # (P, F)
    m0 = (w2.astype(np.complex128) @ basis).real  # (P, 2N+1)
    wh = w2[:, None, :] * hn  # (P, R, F)
    m1 = (wh.reshape(-1, wh.shape[-1]) @ basis).reshape(n_out, n_ref, -1)
    hh = np.conj(hn)[:, :, None, :] * wh[:, None, :, :]  # (P, R, R, F)
    m2 = (hh.reshape(-1, hh.shape[-1]) @ basis).reshape(n_out, n_ref, n_ref, -1)
    j = np.arange(order + 1)
    lag = (j[None, :] - j[:, None]) + order  # (N+1, N+1): k − j, shifted to an index
    big_r = m0[:, lag]  # (P, N+1, N+1)
    # S_o[j, (k, b)] = −Re m1_b(k − j)
    big_s = -m1.real[:, :, lag].transpose(0, 2, 3, 1).reshape(n_out, order + 1, -1)
    # T_o[(j, a), (k, b)] = Re m2_ab(k − j)
    big_t = (
        m2.real[:, :, :, lag]
        .transpose(0, 3, 1, 4, 2)
        .reshape(n_out, (order + 1) * n_ref, (order + 1) * n_ref)
    )
    rs = np.linalg.solve(big_r, big_s)  # (P, N+1, R(N+1))
    m: FloatArray = 2.0 * (big_t.sum(axis=0) - np.einsum("pji,pjk->ik", big_s, rs))
    return 0.5 * (m + m.T)


def poles_at_order(
    m: FloatArray, order: int, n_ref: int, dt: float, band_hz: tuple[float, float]
) -> PoleSet:
    """Poles and participation vectors of denominator order n from the top-order matrix M.

    Parameters
    ----------
    m : (R(N+1), R(N+1)) float
        `normal_matrix` at a top order N >= `order`.
    order : int
        Denominator order n >= 1.
    n_ref : int
        References R.
    dt : float
        Δt of the basis, s.
    band_hz : (F1, F2)
        Poles with natural frequency outside are dropped, Hz.

    Returns
    -------
    PoleSet of the poles with positive damping in the band, one of each conjugate pair.

    Notes
    -----
    With α_n = I the leading block M_n splits as [[M_aa, M_ab], [M_ba, M_bb]] (α_0..α_{n−1}
    against α_n) and the least-squares coefficients are α_lo = −M_aa^-1 M_ab. The poles are
    the roots of det A(z) = 0: the eigenvalues z of the block companion matrix of
    A(z)^T = Σ α_j^T z^j, whose eigenvectors are [l; z l; …; z^{n−1} l], l^T A(z) = 0 the
    participation vector (Peeters et al. 2004). λ = ln(z)/Δt.
    """
    size = n_ref * order
    lead = m[: size + n_ref, : size + n_ref]
    try:
        alpha = -np.linalg.solve(lead[:size, :size], lead[:size, size:])  # (Rn, R)
    except np.linalg.LinAlgError:
        alpha = -np.linalg.lstsq(lead[:size, :size], lead[:size, size:], rcond=None)[0]
    companion = np.zeros((size, size))
    companion[: size - n_ref, n_ref:] = np.eye(size - n_ref)
    # last block row: −[α_0^T … α_{n−1}^T]
    companion[size - n_ref :, :] = (
        -alpha.reshape(order, n_ref, n_ref).transpose(2, 0, 1).reshape(n_ref, size)
    )
    z, vec = np.linalg.eig(companion)
    with np.errstate(divide="ignore", invalid="ignore"):
        s = np.log(z.astype(np.complex128)) / dt
    f_hz = np.abs(s) / (2.0 * math.pi)
    keep = (s.imag > 0.0) & (s.real < 0.0) & (f_hz >= band_hz[0]) & (f_hz <= band_hz[1])
    keep &= np.isfinite(s)
    part = vec[:n_ref, keep].T.astype(np.complex128)
    part /= np.maximum(np.linalg.norm(part, axis=1, keepdims=True), 1e-300)
    order_idx = np.argsort(f_hz[keep])
    poles = s[keep][order_idx].astype(np.complex128)
    return PoleSet(order=order, s=poles, participation=part[order_idx])
