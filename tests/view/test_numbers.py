"""MAC, MPC, shape normalisation, the page's data and the deformed positions."""

from __future__ import annotations

import math

import numpy as np
import pytest

from taprig.client.view.geometry import from_grid
from taprig.client.view.modes import auto_mac, from_peaks, mpc
from taprig.client.view.payload import deflection, normalise, page_data, point_frf, spread
from taprig.client.view.pictures import deformed
from taprig.client.view.scene import nodal_crossings

from .conftest import Known


def test_mac_matches_its_definition() -> None:
    """MAC_ij = |φ_iᴴφ_j|² / ((φ_iᴴφ_i)(φ_jᴴφ_j)) (Allemang & Brown, "A correlation
    coefficient for modal vector analysis", 1982), written out term by term; a complex
    multiple of a shape has MAC 1 with it."""
    rng = np.random.default_rng(3)
    phi = rng.normal(size=(4, 9)) + 1j * rng.normal(size=(4, 9))
    phi[3] = (2 - 5j) * phi[0]
    got = auto_mac(phi)
    for i in range(4):
        for j in range(4):
            num = abs(sum(np.conj(phi[i, k]) * phi[j, k] for k in range(9))) ** 2
            den = sum(abs(v) ** 2 for v in phi[i]) * sum(abs(v) ** 2 for v in phi[j])
            assert got[i, j] == pytest.approx(num / den, rel=1e-12)
    assert got[0, 3] == pytest.approx(1.0, rel=1e-12)


def test_mpc_matches_the_eigenvalue_form() -> None:
    """MPC = ((λ1 − λ2)/(λ1 + λ2))², λ the eigenvalues of [[Sxx, Sxy], [Sxy, Syy]] (Pappa,
    Elliott & Schenk, "Consistent-mode indicator for the eigensystem realization algorithm",
    1993); 1 for a real vector turned by any phase."""
    rng = np.random.default_rng(4)
    phi = rng.normal(size=(3, 12)) + 1j * rng.normal(size=(3, 12))
    phi[2] = np.exp(0.7j) * rng.normal(size=12)
    for row, got in zip(phi, mpc(phi), strict=True):
        x, y = row.real, row.imag
        lam = np.linalg.eigvalsh([[x @ x, x @ y], [x @ y, y @ y]])
        assert got == pytest.approx(((lam[1] - lam[0]) / (lam[1] + lam[0])) ** 2, rel=1e-10)
    assert mpc(phi)[2] == pytest.approx(1.0, rel=1e-12)


def test_normalised_shapes_are_the_truth_rescaled(known: Known) -> None:
    """The page's shapes are the model's shapes times one real factor each (largest = 1)."""
    geo = from_grid(known.data.grid)
    shapes = normalise(spread(known.modes.shape, known.modes.point, geo))
    truth = known.model.shapes[[known.model.index(p) for p in geo.labels]].T
    assert np.abs(shapes).max(axis=1) == pytest.approx(1.0)
    assert np.abs(shapes.imag).max() == 0.0
    for s, t in zip(shapes.real, truth, strict=True):
        ratio = s / np.where(t == 0, np.nan, t)
        ratio = ratio[np.isfinite(ratio)]
        np.testing.assert_allclose(ratio, ratio[0], rtol=1e-12)


def test_page_data_carries_the_modes_and_their_sources(known: Known) -> None:
    geo = from_grid(known.data.grid)
    page = page_data(known.data, known.modes, geo)
    assert page["modes"]["source"] == "fit"
    assert len(page["modes"]["list"]) == known.model.freqs_hz.size
    assert len(page["freq_hz"]) == known.data.freq_hz.size
    assert len(page["modes"]["poles"]) == 14 and page["modes"]["poles"][0]["stable"][-1] is False
    peaks = page_data(known.data, from_peaks(known.data), geo)["modes"]
    assert peaks["source"] == "peaks" and "not a modal fit" in peaks["label"]
    assert peaks["poles"] == []


def test_point_frf_is_h1_in_db_and_degrees(known: Known) -> None:
    """20·log10|H1| and the angle of H1 in degrees (definitions), to the rounding sent."""
    got = point_frf(known.data, 7)
    h = known.data.h1[7, 1]
    r = got["responses"][1]
    np.testing.assert_allclose(r["mag_db"][1:], 20 * np.log10(np.abs(h[1:])), atol=1e-3)
    np.testing.assert_allclose(r["phase_deg"][1:], np.degrees(np.angle(h[1:])), atol=0.01)
    with pytest.raises(IndexError):
        point_frf(known.data, 30)


def test_deflection_at_an_isolated_resonance_is_the_mode_shape(known: Known) -> None:
    """Near an isolated, lightly damped mode r the FRFs over the points are φ_r(i)·φ_r(s)
    times one complex factor (modal superposition; Ewins, Modal Testing, 2000, §2, from
    memory), so the ODS at f_r has MAC ≈ 1 with φ_r."""
    geo = from_grid(known.data.grid)
    r = 0  # the panel's first mode, 65.8 Hz, its neighbours 60 Hz away
    line = int(np.argmin(np.abs(known.data.freq_hz - known.model.freqs_hz[r])))
    ods = deflection(known.data, geo, line)
    phi = np.array(ods["shape"]["re"]) + 1j * np.array(ods["shape"]["im"])
    truth = known.model.shapes[[known.model.index(p) for p in geo.labels], r]
    assert auto_mac(np.stack([phi, truth]))[0, 1] > 0.99


def test_deformed_positions_follow_each_points_direction(known: Known) -> None:
    """x + a·s·Re(φe^{iθ})·d, with d from each point's direction: a "-z" point moves down
    where a "+z" point would move up."""
    rows = list(known.data.grid)
    rows[0] = (*rows[0][:4], "-z")
    geo = from_grid(rows)
    phi = np.zeros(len(rows), dtype=complex)
    phi[0] = phi[1] = 1.0
    moved = deformed(geo, phi, 0.0, 1.0) - geo.xyz
    step = 0.08 * geo.size_m
    np.testing.assert_allclose(moved[0], [0, 0, -step])
    np.testing.assert_allclose(moved[1], [0, 0, step])
    assert deformed(geo, phi, math.pi / 2, 1.0) == pytest.approx(geo.xyz)


def test_nodal_lines_of_a_linear_field_lie_on_its_zero() -> None:
    """On a triangulated grid, a field linear in x and y is linear on every triangle, so the
    zero found by linear interpolation along the edges lies exactly on the field's zero line
    (the plane a + b x + c y = 0); each triangle the line cuts holds one segment, whose ends
    are on two of its edges (linear interpolation: Burden & Faires, Numerical Analysis,
    2011, §3.1)."""
    grid = [(f"P{i}{j}", 0.1 * i, 0.07 * j, 0.0, "+z") for i in range(7) for j in range(5)]
    geo = from_grid(grid)
    x, y = geo.xyz[:, 0], geo.xyz[:, 1]
    value = 0.31 - x + 0.4 * y  # no grid point exactly on the line
    ends, t = nodal_crossings(geo.triangles, value)
    a, b = geo.xyz[ends[..., 0]], geo.xyz[ends[..., 1]]
    at = a + t[..., None] * (b - a)  # (S, 2, 3)
    np.testing.assert_allclose(0.31 - at[..., 0] + 0.4 * at[..., 1], 0.0, atol=1e-12)
    assert ((t > 0) & (t < 1)).all()
    cut = (value[geo.triangles].min(axis=1) < 0) & (value[geo.triangles].max(axis=1) > 0)
    assert len(ends) == int(cut.sum()) > 0
    assert len(nodal_crossings(geo.triangles, value + 10.0)[0]) == 0  # no zero, no line
