"""What the page and the pictures need of a modal model (`ModeSet`), and where it comes from.

`ModeSet` is declared here once: frequencies, damping ratios, MPC, complex shapes over the
test's points, auto-MAC, flags per mode, and the stabilization diagram's poles per model
order. Two sources fill it:

* `from_model(model)`, the one adapter to the modal estimator's `ModalModel` (client/modal):
  it reads freq_hz (M,), damping_ratio (M,), mpc (M,), shape (M, P) complex, point (P,),
  mac (M, M), flags (M lists of short codes) and stabilization (per model order: order,
  freq_hz, damping or damping_ratio, stable).
* `from_peaks(data)`, the stand-in while no fit exists: the quick-look check's peaks
  (client/check/), deflection shapes from Im H1. It is labelled as peaks, never as a fit,
  and has no stabilization poles; its MPC is NaN (a real shape's MPC is 1 by definition).

Numbers: MAC (Allemang & Brown, "A correlation coefficient for modal vector analysis",
1982): |φ_iᴴφ_j|² / ((φ_iᴴφ_i)(φ_jᴴφ_j)). MPC (Pappa, Elliott & Schenk, "Consistent-mode
indicator for the eigensystem realization algorithm", 1993), written with the sums
Sxx = Σ Re², Syy = Σ Im², Sxy = Σ Re·Im as ((Sxx − Syy)² + 4 Sxy²) / (Sxx + Syy)², which
is |Σφ²|² / (Σ|φ|²)²: 1 for a real (or uniformly phased) vector.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..dataset import TestData

__all__ = ["ModeSet", "PoleRow", "auto_mac", "from_model", "from_peaks", "modes_for", "mpc"]

FloatArray = NDArray[np.float64]
ComplexArray = NDArray[np.complex128]
PEAKS_SOURCE = "peaks"
PEAKS_LABEL = "quick-look peaks (Im H1 at each peak; not a modal fit)"
FIT_LABEL = "modal fit"


@dataclass(frozen=True, slots=True, eq=False)
class PoleRow:
    """One model order's poles: freq_hz (n,) Hz, damping (n,) ratio, stable (n,) bool."""

    order: int
    freq_hz: FloatArray
    damping: FloatArray
    stable: NDArray[np.bool_]


@dataclass(frozen=True, slots=True, eq=False)
class ModeSet:
    """M modes over P points (in `point` order).

    freq_hz (M,) Hz; damping_ratio (M,) 1 (NaN: unresolved); mpc (M,) 1; shape (M, P)
    complex, any scale; mac (M, M); flags: per mode, short codes; poles: the
    stabilization diagram (empty without a fit); source "fit" or "peaks" and a label the
    page shows.
    """

    source: str
    label: str
    freq_hz: FloatArray
    damping_ratio: FloatArray
    mpc: FloatArray
    shape: ComplexArray
    point: tuple[str, ...]
    mac: FloatArray
    flags: tuple[tuple[str, ...], ...]
    poles: tuple[PoleRow, ...] = ()

    def __len__(self) -> int:
        return int(self.freq_hz.size)


def auto_mac(shape: ComplexArray) -> FloatArray:
    """MAC (M, M) of the rows of `shape` (M, P) with each other (module docstring)."""
    phi = np.asarray(shape, dtype=np.complex128)
    cross = phi.conj() @ phi.T
    own = np.real(np.einsum("mp,mp->m", phi.conj(), phi))
    with np.errstate(invalid="ignore", divide="ignore"):
        out: FloatArray = np.abs(cross) ** 2 / np.outer(own, own)
    return np.nan_to_num(out)


def mpc(shape: ComplexArray) -> FloatArray:
    """Modal phase collinearity (M,) of the rows of `shape` (M, P) (module docstring)."""
    phi = np.atleast_2d(np.asarray(shape, dtype=np.complex128))
    with np.errstate(invalid="ignore", divide="ignore"):
        out: FloatArray = np.abs((phi**2).sum(axis=1)) ** 2 / (np.abs(phi) ** 2).sum(axis=1) ** 2
    return np.nan_to_num(out)


def from_model(model: Any, data: TestData) -> ModeSet:
    """The adapter: a `ModalModel` of client/modal as a ModeSet over `data.points`.

    The one place that knows the estimator's field names (module docstring). Points the
    model lacks get a zero shape; the model's flags pass through as given.
    """
    order = {p: i for i, p in enumerate(model.point)}
    shape = np.zeros((len(model.freq_hz), len(data.points)), dtype=np.complex128)
    for j, p in enumerate(data.points):
        if p in order:
            shape[:, j] = np.asarray(model.shape)[:, order[p]]
    return ModeSet(
        source="fit", label=FIT_LABEL,
        freq_hz=np.asarray(model.freq_hz, dtype=np.float64),
        damping_ratio=np.asarray(model.damping_ratio, dtype=np.float64),
        mpc=np.asarray(model.mpc, dtype=np.float64), shape=shape, point=data.points,
        mac=np.asarray(model.mac, dtype=np.float64),
        flags=tuple(tuple(str(c) for c in f) for f in model.flags), poles=_poles(model),
    )  # fmt: skip


def _poles(model: Any) -> tuple[PoleRow, ...]:
    """The stabilization diagram: a ModalModel's diagram arrays, or rows given as such."""
    if not hasattr(model, "diagram_order"):
        return tuple(
            PoleRow(int(row.order), np.asarray(row.freq_hz, dtype=np.float64),
                    np.asarray(row.damping, dtype=np.float64),
                    np.asarray(row.stable, dtype=np.bool_))
            for row in getattr(model, "stabilization", ())
        )  # fmt: skip
    from ..modal.stability import STABLE

    orders = np.asarray(model.diagram_order)
    return tuple(
        PoleRow(int(n), np.asarray(model.diagram_freq_hz, dtype=np.float64)[orders == n],
                np.asarray(model.diagram_damping_ratio, dtype=np.float64)[orders == n],
                np.asarray(model.diagram_status)[orders == n] == STABLE)
        for n in np.unique(orders)
    )  # fmt: skip


def from_peaks(data: TestData) -> ModeSet:
    """The stand-in: the quick-look check's peaks as modes (see the module docstring)."""
    from ..check import check

    peaks = check(data).modes
    shape = np.array([p.shape for p in peaks], dtype=np.complex128).reshape(-1, len(data.points))
    flags: list[tuple[str, ...]] = []
    for p in peaks:
        codes = ["peak"]
        if not np.isfinite(p.damping_ratio):
            codes.append("no-damping")
        flags.append(tuple(codes))
    return ModeSet(
        source=PEAKS_SOURCE, label=PEAKS_LABEL,
        freq_hz=np.array([p.freq_hz for p in peaks], dtype=np.float64),
        damping_ratio=np.array([p.damping_ratio for p in peaks], dtype=np.float64),
        # Im H1 shapes are real by construction: their MPC would be 1 and say nothing
        mpc=np.full(len(peaks), np.nan), shape=shape, point=data.points, mac=auto_mac(shape),
        flags=tuple(flags),
    )  # fmt: skip


def modes_for(data: TestData) -> ModeSet:
    """The modes to show: the modal fit when client/modal is installed, else the peaks."""
    import importlib

    try:
        modal = importlib.import_module("taprig.client.modal")
    except ModuleNotFoundError:
        return from_peaks(data)
    return from_model(modal.fit(data), data)
