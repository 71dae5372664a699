"""The quality figures against their published definitions, on vectors worked by hand."""

from __future__ import annotations

import math

import numpy as np

from taprig.client.modal.plscf import ERROR_FLOOR, line_weights, random_error
from taprig.client.modal.quality import mac, mpc, participation_share


def test_mac_is_allemang_and_brown() -> None:
    """MAC(a, b) = |a^H b|² / ((a^H a)(b^H b)) (Allemang & Brown, "A correlation coefficient
    for modal vector analysis", Proc. 1st IMAC, 1982): 1 for scaled copies (any complex
    factor), 0 for orthogonal vectors, 0.5 for vectors at 45°."""
    a = np.array([1.0, 2.0, -1.0], dtype=complex)
    assert math.isclose(mac(a, (2 - 3j) * a)[0, 0], 1.0)
    assert math.isclose(mac(np.array([1, 0], complex), np.array([0, 1], complex))[0, 0], 0.0)
    assert math.isclose(mac(np.array([1, 0], complex), np.array([1, 1], complex))[0, 0], 0.5)


def pappa_mpc(phi: np.ndarray) -> float:
    """MPC in its eigenvalue form, ((λ1 − λ2)/(λ1 + λ2))² with λ the eigenvalues of the
    2 × 2 matrix of the real and imaginary parts' sums of products (Pappa, Elliott &
    Schenk 1993; the form from memory), the eigenvalues by numpy, not the closed form."""
    x, y = phi.real, phi.imag
    cov = np.array([[x @ x, x @ y], [x @ y, y @ y]])
    lam = np.linalg.eigvalsh(cov)
    return float(((lam[1] - lam[0]) / (lam[1] + lam[0])) ** 2)


def test_mpc_of_real_circular_and_random_vectors() -> None:
    """1 for a real (normal) mode at any phase, 0 for entries on a circle; the closed form
    equals the eigenvalue form computed by numpy's eigvalsh on random vectors (Pappa,
    Elliott & Schenk, J. Guidance, Control and Dynamics 16(5), 1993)."""
    real = np.array([1.0, -2.0, 0.5]) * np.exp(0.7j)
    assert math.isclose(mpc(real[None])[0], 1.0)
    circle = np.exp(1j * np.array([0.0, 0.5, 1.0, 1.5]) * math.pi)
    assert math.isclose(mpc(circle[None])[0], 0.0, abs_tol=1e-15)
    rng = np.random.default_rng(4)
    shapes = rng.normal(size=(5, 8)) + 1j * rng.normal(size=(5, 8))
    assert np.allclose(mpc(shapes), [pappa_mpc(s) for s in shapes], rtol=1e-12)


def test_random_error_and_weights() -> None:
    """ε_r = sqrt(1 − γ²)/(|γ| sqrt(2 n_d)) (Bendat & Piersol, Random Data, 4th ed., 2010,
    §9.2, from memory): 0.0725 at γ² = 0.95 and 5 averages; weights clipped at the floor."""
    coh = np.array([[[0.95, 1.0]]])
    eps = random_error(coh, np.array([5]))
    assert math.isclose(eps[0, 0, 0], math.sqrt(0.05) / (math.sqrt(0.95) * math.sqrt(10)))
    assert eps[0, 0, 1] == 0.0
    w = line_weights(coh, np.array([5]))
    assert math.isclose(w[0, 0], 1.0 / eps[0, 0, 0]) and w[0, 1] == 1.0 / ERROR_FLOOR


def test_participation_share_sums_to_one() -> None:
    share = participation_share(np.array([[3.0, 4.0j], [0.0, 0.0]]))
    assert np.allclose(share, [[0.36, 0.64], [0.0, 0.0]])
