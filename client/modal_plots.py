"""PNG plots of a modal model: the stabilization diagram, the auto-MAC, and each point's
measured against synthesized FRF.

Entry point: ``write_modal_plots(model, folder) -> list[Path]`` writes

* ``stabilization.png``: the summed measured |A| over points and references (dB, left
  axis) with every pole of the diagram at its natural frequency and model order (right
  axis): a dot for a new pole, a small cross for one stable in frequency only, a filled
  square for one stable in frequency, damping and participation vector; the chosen
  modes as vertical lines;
* ``auto-mac.png``: the MAC of every pair of mode shapes as a grey-scale matrix with its
  values;
* ``synthesis-<point>.png``: |A| in dB of the point's measured and synthesized FRFs, one
  colour per reference, the synthesis error in the title.

matplotlib (the ``plots`` extra) is imported inside the functions, through plots.py's Agg
figure helper; the estimator (client/modal/) never draws.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from .modal.model import ModalModel
from .modal.stability import FREQ_OK, STABLE
from .plots import _figure, _safe

if TYPE_CHECKING:
    from matplotlib.figure import Figure

__all__ = ["auto_mac_figure", "stabilization_figure", "synthesis_figure", "write_modal_plots"]


def _db(values: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore"):
        out: np.ndarray = 20.0 * np.log10(np.abs(values))
    return out


def stabilization_figure(model: ModalModel) -> Figure:
    """The stabilization diagram over the summed FRF (see the module docstring)."""
    fig = _figure(10.0, 6.0)
    ax = fig.subplots()
    f = model.synth_freq_hz
    ax.plot(f, _db(np.abs(model.measured).sum(axis=(0, 1))), color="0.55", lw=0.8)
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("Σ|A| (dB re 1 (m/s²)/N)")
    orders = model.diagram_order
    right = ax.twinx()
    st = model.diagram_status
    kinds = (
        (st & FREQ_OK == 0, ".", "tab:red", "new"),
        ((st & FREQ_OK != 0) & (st != STABLE), "x", "tab:orange", "stable f"),
        (st == STABLE, "s", "tab:blue", "stable f, ζ, vector"),
    )
    for mask, marker, colour, label in kinds:
        right.plot(model.diagram_freq_hz[mask], orders[mask], marker, ms=3, color=colour,
                   label=label, ls="none")  # fmt: skip
    for fk in model.freq_hz:
        right.axvline(fk, color="k", lw=0.5, alpha=0.4)
    right.set_ylabel("model order")
    right.legend(loc="upper left", fontsize="small")
    ax.set_xlim(float(f[0]), float(f[-1]))
    ax.set_title(f"stabilization diagram, {model.n_modes} modes chosen")
    return fig


def auto_mac_figure(model: ModalModel) -> Figure:
    """The auto-MAC matrix with its values."""
    fig = _figure(7.0, 6.0)
    ax = fig.subplots()
    image = ax.imshow(model.mac, vmin=0.0, vmax=1.0, cmap="Greys", origin="lower")
    fig.colorbar(image, ax=ax, label="MAC")
    ticks = np.arange(model.n_modes)
    names = [f"{f:.0f}" for f in model.freq_hz]
    ax.set_xticks(ticks, names, rotation=90, fontsize="x-small")
    ax.set_yticks(ticks, names, fontsize="x-small")
    if model.n_modes <= 30:
        for i in range(model.n_modes):
            for j in range(model.n_modes):
                value = model.mac[i, j]
                ax.text(j, i, f"{value:.2f}"[1:] if value < 1 else "1", ha="center",
                        va="center", fontsize=5, color="w" if value > 0.5 else "k")  # fmt: skip
    ax.set_title("auto-MAC of the mode shapes (natural frequency, Hz)")
    return fig


def synthesis_figure(model: ModalModel, row: int) -> Figure:
    """Measured and synthesized |A| of one point, one colour per reference."""
    fig = _figure(8.0, 4.5)
    ax = fig.subplots()
    f = model.synth_freq_hz
    for r, label in enumerate(model.reference):
        line = ax.plot(f, _db(model.measured[row, r]), lw=0.8, label=f"{label} measured")[0]
        ax.plot(f, _db(model.synthesized[row, r]), lw=0.8, ls="--", color=line.get_color(),
                label=f"{label} synthesized")  # fmt: skip
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("|A| (dB re 1 (m/s²)/N)")
    ax.legend(fontsize="small")
    ax.set_title(f"point {model.point[row]}: synthesis error "
                 f"{100.0 * model.synthesis_error_point[row]:.1f} %")  # fmt: skip
    return fig


def write_modal_plots(model: ModalModel, folder: Path) -> list[Path]:
    """Write every plot of the module docstring into `folder` (created); their paths."""
    folder.mkdir(parents=True, exist_ok=True)
    out = []
    for name, fig in (("stabilization.png", stabilization_figure(model)),
                      ("auto-mac.png", auto_mac_figure(model))):  # fmt: skip
        fig.savefig(folder / name)
        out.append(folder / name)
    for row, label in enumerate(model.point):
        path = folder / f"synthesis-{_safe(label)}.png"
        synthesis_figure(model, row).savefig(path)
        out.append(path)
    return out
