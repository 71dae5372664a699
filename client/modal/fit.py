"""`fit`: a test's modes from its FRFs, pLSCF poles → stabilization → LSFD → quality.

The steps, each in its own module: the reduced normal matrix at the top order and the poles
of every order (plscf.py), the stabilization diagram and the choice of one pole per mode
(stability.py), residues and shapes with residual terms (lsfd.py), MAC, MPC, synthesis
error and flags (quality.py), all gathered in a `ModalModel` (model.py).

References, outputs and the driving point follow the test's roving mode:

* roving hammer: the struck grid points are the outputs and each fixed sensor a reference
  (H(point, sensor) = H(sensor, point) by Maxwell's reciprocity; TestData.h1 is (P, R, F));
* roving sensor: each roving sensor channel at each point is an output and the fixed
  hammer point the one reference.

A driving point (an output measured where a reference is) scales single modes to unit
modal mass; without one, every shape has unit norm, and `meta["scaling"]` says so.
The exponential window's decay 1/τ is removed from every fitted pole: σ = σ_fit − 1/τ.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray
from threadpoolctl import threadpool_limits

from ..band import band_of
from ..dataset import TestData
from ..errors import FitError
from . import lsfd, plscf, quality, stability
from .model import ModalModel

__all__ = ["default_orders", "fit"]

Progress = Callable[[int, int], None]
ComplexArray = NDArray[np.complex128]
MAX_ORDER = 200  # beyond this the companion matrices cost more than any test is worth


@dataclass(frozen=True, slots=True)
class _Layout:
    """The test as outputs × references: h, coherence (P, R, F); n_averages (P,)."""

    h: ComplexArray
    coherence: NDArray[np.float64]
    n_averages: NDArray[np.int64]
    points: tuple[str, ...]
    references: tuple[str, ...]
    driving: tuple[int, int] | None
    driving_name: str


@dataclass(frozen=True, slots=True)
class _Problem:
    """One fit's inputs: the band's lines (F), their FRFs h (P, R, F) and weights (P, F),
    the basis' Δt (s), the orders (N1, N2), the tolerances and the flag settings."""

    data: TestData
    lay: _Layout
    freq: NDArray[np.float64]
    h: ComplexArray
    weight: NDArray[np.float64]
    dt: float
    band: tuple[float, float]
    orders: tuple[int, int]
    tol: stability.StabilityTolerances
    qs: quality.QualitySettings


def _layout(data: TestData) -> _Layout:
    if data.roving_mode == "sensor":
        n_p, n_r, n_f = data.h1.shape
        labels = tuple(p if n_r == 1 else f"{p}/{r}" for p in data.points for r in data.responses)
        driving = None
        for row, r in data.driving_point_rows():
            driving = (row * n_r + r, 0)
            break
        return _Layout(
            h=data.h1.reshape(n_p * n_r, 1, n_f),
            coherence=data.coherence.reshape(n_p * n_r, 1, n_f),
            n_averages=np.repeat(data.n_averages, n_r),
            points=labels,
            references=(data.reference,),
            driving=driving,
            driving_name="" if driving is None else f"{labels[driving[0]]} (hammer)",
        )
    rows = data.driving_point_rows()
    driving = rows[0] if rows else None
    name = "" if driving is None else f"{data.points[driving[0]]} ({data.responses[driving[1]]})"
    return _Layout(data.h1, data.coherence, data.n_averages, data.points, data.responses,
                   driving, name)  # fmt: skip


def default_orders(n_ref: int) -> tuple[int, int]:
    """Orders (N1, N2) when none are given: 120/R at the top, about 60 poles a side."""
    top = max(8, math.ceil(120 / max(n_ref, 1)))
    return (max(2, top // 10), top)


def _lines(lay: _Layout, freq: NDArray[np.float64], band: tuple[float, float]) -> NDArray[np.bool_]:
    """The band's lines where every FRF is a number; FitError when too few."""
    in_band = (freq >= band[0]) & (freq <= band[1]) & (freq > 0.0)
    bad = ~np.isfinite(lay.h).all(axis=(0, 1)) | ~np.isfinite(lay.coherence).all(axis=(0, 1))
    lines = in_band & ~bad
    dropped = int((in_band & bad).sum())
    if in_band.sum() == 0:
        raise FitError(f"band {band[0]:g}:{band[1]:g} Hz holds no frequency line of the test "
                       f"({freq[0]:g} to {freq[-1]:g} Hz)")  # fmt: skip
    if dropped > in_band.sum() // 2:
        raise FitError(f"{dropped} of the {int(in_band.sum())} lines in {band[0]:g}:{band[1]:g}"
                       " Hz hold NaN or inf in some FRF or coherence; measure those points "
                       "again")  # fmt: skip
    return lines


def fit(
    data: TestData,
    band: tuple[float, float] | None = None,
    orders: tuple[int, int] | None = None,
    pick: Sequence[float] | None = None,
    progress: Progress | None = None,
    tolerances: stability.StabilityTolerances | None = None,
    settings: quality.QualitySettings | None = None,
) -> ModalModel:
    """The modes of a test (see the module docstring).

    Parameters
    ----------
    data : TestData (accelerance H1, (P, R, F)).
    band : (F1, F2) Hz, default the quick-look check's analysis band.
    orders : (N1, N2) the stabilization diagram's model orders, default `default_orders`.
    pick : frequencies, Hz, to take one pole near each instead of the automatic choice.
    progress : called with (orders done, orders in all).

    Raises FitError when the data cannot carry the fit, with what to change.
    """

    tol = tolerances or stability.StabilityTolerances()
    qs = settings or quality.QualitySettings()
    lay = _layout(data)
    if len(lay.points) < 2:
        raise FitError(f"test {data.test!r} has {len(lay.points)} measured point; a mode shape "
                       "needs at least 2")  # fmt: skip
    band = band or band_of(data.freq_hz, data.gff)
    lines = _lines(lay, data.freq_hz, band)
    n_ref = len(lay.references)
    n1, n2 = orders or default_orders(n_ref)
    n_lines = int(lines.sum())
    if not 1 <= n1 <= n2 <= MAX_ORDER:
        raise FitError(f"orders {n1}:{n2}: need 1 <= N1 <= N2 <= {MAX_ORDER}")
    if n_ref * (n2 + 1) > n_lines:
        raise FitError(f"orders up to {n2} with {n_ref} reference(s) need at least "
                       f"{n_ref * (n2 + 1)} lines; the band {band[0]:g}:{band[1]:g} Hz holds "
                       f"{n_lines}: lower the orders or widen the band")  # fmt: skip
    freq = data.freq_hz[lines]
    weight = plscf.line_weights(lay.coherence[..., lines], lay.n_averages)
    problem = _Problem(data, lay, freq, lay.h[..., lines], weight, 1.0 / (2.0 * float(freq[-1])),
                       band, (n1, n2), tol, qs)  # fmt: skip
    # Every matrix here is small (companions of R·n ≤ a few hundred rows): BLAS threads cost
    # more than they bring, and on a busy machine many times more (bench_modal.py).
    try:
        with threadpool_limits(limits=1, user_api="blas"):
            return _solve(problem, pick, progress)
    except np.linalg.LinAlgError as exc:
        raise FitError(
            f"the fit's equations are singular ({exc}): are the coherences of "
            f"some point zero over {band[0]:g}:{band[1]:g} Hz?"
        ) from None


def _solve(p: _Problem, pick: Sequence[float] | None, progress: Progress | None) -> ModalModel:
    """Poles of every order, the diagram, the choice, then `_assemble`."""
    (n1, n2), band = p.orders, p.band
    n_ref = len(p.lay.references)
    m = plscf.normal_matrix(p.h, 2.0 * math.pi * p.freq * p.dt, p.weight, n2)
    sets = []
    for n in range(n1, n2 + 1):
        sets.append(plscf.poles_at_order(m, n, n_ref, p.dt, band))
        if progress is not None:
            progress(n - n1 + 1, n2 - n1 + 1)
    diagram = stability.diagram(sets, p.tol)
    chosen = (
        stability.choose_picked(diagram, pick, p.tol)
        if pick
        else stability.choose_automatic(diagram, p.tol, n_ref)
    )
    if chosen.s.size == 0:
        raise FitError(f"no stable mode in {band[0]:g}:{band[1]:g} Hz at orders "
                       f"{n1}:{n2}: widen the band, raise the orders or name modes with "
                       "--pick")  # fmt: skip
    return _assemble(p, chosen, diagram)


def _assemble(p: _Problem, chosen: stability.Chosen, diagram: stability.Diagram) -> ModalModel:
    """LSFD on the chosen poles, quality figures and flags, and the model record."""
    data, lay, freq, h, band = p.data, p.lay, p.freq, p.h, p.band
    decay = 0.0 if math.isinf(data.exp_tau_s) else 1.0 / data.exp_tau_s
    rms = np.sqrt(np.mean(np.abs(h) ** 2, axis=(0, 1)))
    line_weight = p.weight.mean(axis=0) / np.maximum(rms, 1e-300)
    res = lsfd.fit_residues(h, 2.0 * math.pi * freq, chosen.s, line_weight)
    modes = lsfd.shapes_from_residues(res, chosen.s, chosen.multiplicity, decay, lay.driving)
    fitted = chosen.s[modes.source]
    auto = quality.mac(modes.shape, modes.shape)
    synth_mode = quality.synthesis_error_per_mode(freq, h, res.synthesized, fitted)
    flags = quality.flags(auto_mac=auto, synthesis_error=synth_mode, pole_fitted=fitted,
                          decay_per_s=decay, band_hz=band, n_ref=len(lay.references),
                          settings=p.qs)  # fmt: skip
    sigma = -modes.pole.real
    zeta = np.where(sigma > 0.0, sigma / np.abs(modes.pole), np.nan)
    notes = []
    if len(lay.references) == 1:
        notes.append("one reference: a repeated root (two modes at one frequency) cannot be "
                     "told from a single mode; fit a test with two or more references")  # fmt: skip
    if lay.driving is None:
        notes.append("no driving point: shapes are scaled to unit norm")
    meta: dict[str, Any] = {
        "test": data.test, "rig": data.rig, "roving_mode": data.roving_mode,
        "band_hz": list(band), "orders": list(p.orders), "tolerances": asdict(p.tol),
        "quality": asdict(p.qs), "exp_tau_s": None if math.isinf(data.exp_tau_s) else
        data.exp_tau_s, "weighting": "1 / Bendat & Piersol random error of |H|, clipped at "
        f"{plscf.ERROR_FLOOR:g}", "driving_point": lay.driving_name or None,
        "scaling": f"unit modal mass at driving point {lay.driving_name} (single modes)"
        if lay.driving else "unit norm", "multiplicity": chosen.multiplicity.tolist(),
        "notes": notes,
    }  # fmt: skip
    return ModalModel(
        freq_hz=np.abs(modes.pole) / (2.0 * math.pi),
        damping_ratio=zeta,
        damping_ratio_windowed=-fitted.real / np.abs(fitted),
        shape=modes.shape,
        point=lay.points,
        reference=lay.references,
        participation=modes.participation,
        mac=auto,
        mpc=quality.mpc(modes.shape),
        synthesis_error=synth_mode,
        synthesis_error_point=quality.synthesis_error_per_point(h, res.synthesized),
        flags=flags,
        scaling=modes.scaling,
        diagram_order=diagram.order,
        diagram_freq_hz=diagram.freq_hz,
        diagram_damping_ratio=diagram.damping_ratio,
        diagram_status=diagram.status,
        synth_freq_hz=freq,
        measured=h,
        synthesized=res.synthesized,
        meta=meta,
        geometry=_geometry(data, notes),
    )


def _geometry(data: TestData, notes: list[str]) -> dict[str, Any] | None:
    """The test's geometry for the model (its outline, else its grid); a note when the
    outline it carries cannot be drawn (the rig checked it, so only a geometry the
    workstation cannot triangulate gets here)."""
    from ..view.geometry import GeometryError
    from ..view.outline import geometry_of

    try:
        return geometry_of(data).to_dict()
    except GeometryError as exc:
        notes.append(f"no geometry: {exc}")
        return None
