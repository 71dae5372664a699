"""Residues and mode shapes by the least-squares frequency-domain method (LSFD).

References:
    B. Peeters, H. Van der Auweraer, P. Guillaume, J. Leuridan, "The PolyMAX frequency-domain
    method: a new standard for modal parameter estimation?", Shock and Vibration 11, 2004
    (LSFD with the poles of the stabilization diagram, lower and upper residuals).
    D. J. Ewins, Modal Testing: Theory, Practice and Application, 2nd ed., 2000, §2.3 and
    §4.3 (receptance of a mass-normalised viscously damped system; residual terms; from
    memory).

Model of the accelerance (m/s²)/N of output p (a grid point) and reference r, as measured
through an exponential window (every pole shifted by −1/τ), over the band's lines:

    A_pr(ω) = Σ_k [ Q_kpr / (iω − λ'_k) + conj(Q_kpr) / (iω − conj λ'_k) ]
              + L_pr + U_pr (iω)² + V_pr (iω)⁴

λ'_k the chosen poles as fitted (window included), Q_k the accelerance residues, L the
lower residual (modes below the band act as masses: a constant in accelerance; it also
takes the constant every in-band mode's accelerance carries), U and V the upper residual:
a mode far above the band has the receptance (1/K)(1 + ω²/ω_r² + …), an accelerance
−ω²/K − ω⁴/(Kω_r²) − …, of which the first two terms are kept (the second matters for
modes just above the band's top). For a mass-normalised mode φ the
receptance is Σ_k φφ^T / (ω_k² − ω² + 2iζ_kω_kω) = Σ_k [R_k/(iω − λ_k) + conj], with
R_k = φ_k φ_k^T / (2iω_dk) and λ_k = −σ_k + iω_dk the pole without the window; its
accelerance (iω)² R/(iω − λ) has the residue R λ², which the window keeps while shifting
the pole: Q_k = R_k λ_k², λ_k = λ'_k + 1/τ.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

__all__ = ["LsfdFit", "Shapes", "fit_residues", "shapes_from_residues"]

FloatArray = NDArray[np.float64]
ComplexArray = NDArray[np.complex128]
IntArray = NDArray[np.int64]


@dataclass(frozen=True, slots=True)
class LsfdFit:
    """residue: (K, P, R) accelerance residues Q_k; lower: (P, R) L, (m/s²)/N; upper:
    (2, P, R) U and V, (m/s²)/N per (rad/s)² and per (rad/s)⁴; synthesized: (P, R, F) the
    model's accelerance."""

    residue: ComplexArray
    lower: ComplexArray
    upper: ComplexArray
    synthesized: ComplexArray


@dataclass(frozen=True, slots=True)
class Shapes:
    """One row per mode (M = Σ multiplicity): pole (M,) without the window, rad/s;
    shape (M, P) complex; participation (M, R) complex: the mode's receptance residue is
    shape ⊗ participation / (2iω_d) at unit modal mass (participation = the shape at the
    references), shape ⊗ participation at unit norm; scaling (M,)
    "unit modal mass" or "unit norm"; source (M,) index of the chosen pole."""

    pole: ComplexArray
    shape: ComplexArray
    participation: ComplexArray
    scaling: tuple[str, ...]
    source: IntArray


def _basis(omega: FloatArray, poles: ComplexArray) -> tuple[ComplexArray, FloatArray]:
    """Complex basis columns (F, 2K + 6) for real unknowns, and each column's scale."""
    iw = 1j * omega[:, None]
    u = 1.0 / (iw - poles[None, :])
    v = 1.0 / (iw - np.conj(poles)[None, :])
    ones = np.ones((omega.size, 1), dtype=np.complex128)
    cols = np.hstack([u + v, 1j * (u - v), ones, 1j * ones, iw**2, 1j * iw**2, iw**4,
                      1j * iw**4])  # fmt: skip
    scale = np.linalg.norm(cols, axis=0)
    scale[scale == 0.0] = 1.0
    return cols / scale, scale


def fit_residues(
    h: ComplexArray, omega: FloatArray, poles: ComplexArray, weight: FloatArray
) -> LsfdFit:
    """Least-squares residues and residual terms for fixed poles, all outputs at once.

    Parameters
    ----------
    h : (P, R, F) complex
        Measured accelerance, (m/s²)/N.
    omega : (F,) float
        Angular frequency of each line, rad/s.
    poles : (K,) complex
        Poles as fitted (window included), rad/s, Im > 0.
    weight : (F,) float
        Weight of each line's equation (fit.py divides the quality weight by the rms |H|
        of the line, so that every line counts by its relative error: otherwise the
        strong, lightly damped modes' lines decide the residual terms and a heavily
        damped first mode, a few % of the largest peak, takes their misfit).

    Returns
    -------
    LsfdFit

    Notes
    -----
    With Q = a + ib the model is linear in the real unknowns a, b, L, U, V; every output
    and reference shares the basis, so one real least-squares problem
    [W Re G; W Im G] x = [W Re A; W Im A] with P·R right-hand sides gives them all.
    """
    n_out, n_ref, n_f = h.shape
    k = poles.size
    cols, scale = _basis(omega, poles)
    wg = cols * weight[:, None]
    lhs = np.vstack([wg.real, wg.imag])
    rhs_c = (h.reshape(-1, n_f) * weight[None, :]).T  # (F, P·R)
    rhs = np.vstack([rhs_c.real, rhs_c.imag])
    x = np.linalg.lstsq(lhs, rhs, rcond=None)[0] / scale[:, None]  # (2K+6, P·R)
    q = (x[:k] + 1j * x[k : 2 * k]).T.reshape(n_out, n_ref, k).transpose(2, 0, 1)
    lower = (x[2 * k] + 1j * x[2 * k + 1]).reshape(n_out, n_ref)
    upper = (x[2 * k + 2 :: 2] + 1j * x[2 * k + 3 :: 2]).reshape(2, n_out, n_ref)
    synth = (cols * scale) @ x  # (F, P·R)
    return LsfdFit(
        residue=q.astype(np.complex128),
        lower=lower.astype(np.complex128),
        upper=upper.astype(np.complex128),
        synthesized=synth.T.reshape(n_out, n_ref, n_f).astype(np.complex128),
    )


def _split(res: ComplexArray, count: int) -> tuple[ComplexArray, ComplexArray]:
    """`count` shapes (count, P) and participation vectors (count, R) of a residue (P, R)."""
    if count == 1:
        u, sv, vh = np.linalg.svd(res, full_matrices=False)
        return (u[:, :1] * sv[:1]).T, np.conj(vh[:1]).astype(np.complex128)
    u, _, _ = np.linalg.svd(np.hstack([res.real, res.imag]), full_matrices=False)
    psi = u[:, :count].astype(np.complex128)  # (P, count), orthonormal
    part = np.linalg.lstsq(psi, res, rcond=None)[0].astype(np.complex128)  # (count, R)
    return psi.T, part


def shapes_from_residues(
    fit: LsfdFit,
    poles: ComplexArray,
    multiplicity: IntArray,
    decay_per_s: float,
    driving: tuple[int, int] | None,
) -> Shapes:
    """Mode shapes and participation vectors from the residue matrices.

    Parameters
    ----------
    fit : LsfdFit of K poles.
    poles : (K,) complex, as fitted (window included), rad/s.
    multiplicity : (K,) int, modes per pole (2 for a repeated root, at most R).
    decay_per_s : float
        1/τ of the exponential window, 1/s (0 without one).
    driving : (row, reference) or None
        The driving point: the output row struck where reference `reference` is measured.

    Notes
    -----
    The receptance residue R_k = Q_k / λ_k² (λ_k = λ'_k + 1/τ) has rank 1 for a single
    mode, R_k = ψ l^T, and rank 2 for a repeated root seen by two references. Its largest
    singular triplet u s v^H gives a single mode: ψ = u s, l = conj(v) (the rank-1
    truncation of the residue, i.e. least squares). For a repeated root the data fix only
    the plane of its modes, not a basis in it (any two independent combinations fit
    alike); its shapes are taken real and orthonormal over the points, the leading left
    singular vectors of [Re R_k, Im R_k] (normal modes: R_k is a real matrix times
    1/(2iω_d)), and their participation vectors by least squares, L^T = Ψ^+ R_k.
    With a driving point (p0, r0) and a single mode, 2iω_d R_k[:, r0] = φ φ(p0), so
    φ(p0) = sqrt(2iω_d R_k[p0, r0]) and φ = 2iω_d R_k[:, r0] / φ(p0): unit modal mass
    (Ewins 2000, §2.3). Otherwise ψ is scaled to unit norm with its largest entry real
    and positive.
    """
    true_poles = poles + decay_per_s
    rows_pole, rows_shape, rows_part, scaling, source = [], [], [], [], []
    for k, lam in enumerate(true_poles):
        res = fit.residue[k] / lam**2  # (P, R)
        psis, parts = _split(res, int(multiplicity[k]))
        for j in range(int(multiplicity[k])):
            psi, part = psis[j], parts[j]
            how = "unit norm"
            if driving is not None and multiplicity[k] == 1:
                col = 2j * lam.imag * psi * part[driving[1]]
                root = np.sqrt(col[driving[0]])
                if abs(root) > 0.0:
                    shape = col / root
                    at = int(np.argmax(np.abs(shape)))
                    part = 2j * lam.imag * part * (psi[at] / shape[at])
                    psi, how = shape, "unit modal mass"
            if how == "unit norm":
                big = psi[np.argmax(np.abs(psi))]
                turn = abs(big) / big if abs(big) > 0 else 1.0
                norm = float(np.linalg.norm(psi)) or 1.0
                part = part * norm / turn
                psi = psi * turn / norm
            elif psi[np.argmax(np.abs(psi))].real < 0:
                psi, part = -psi, -part
            rows_pole.append(lam)
            rows_shape.append(psi)
            rows_part.append(part)
            scaling.append(how)
            source.append(k)
    n_out, n_ref = fit.lower.shape
    return Shapes(
        pole=np.array(rows_pole, dtype=np.complex128),
        shape=np.array(rows_shape, dtype=np.complex128).reshape(-1, n_out),
        participation=np.array(rows_part, dtype=np.complex128).reshape(-1, n_ref),
        scaling=tuple(scaling),
        source=np.array(source, dtype=np.int64),
    )
