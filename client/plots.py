"""PNG plots of one test: FRFs per point and the deflection shape at each peak.

Entry point: ``write_plots(data, result, folder) -> list[Path]`` writes

* ``frf-<point>.png``, one per measured point: three panels sharing the frequency axis,
  |H1| in dB re 1 (m/s²)/N, the phase of H1 in degrees, and the coherence, one curve per
  response, from 0 Hz to twice the top of the check's analysis band (shaded). One file
  per point keeps each small and lets a reader open just the point that was flagged.
* ``shape-<n>-<freq>Hz.png``, one per peak of the check (`client/check.py`): the
  deflection shape (Im H1 at the peak line, largest = 1) over the grid's x, y
  coordinates, colour and marker size by value, each point labelled.

`frf_figure` and `shape_figure` build one figure each (for tests or other layouts).
matplotlib is an optional extra (``pip install 'taprig[plots]'``), imported only inside
these functions and used through its Agg canvas (no display, no global backend switch).
"""

from __future__ import annotations

import math
import re
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from .check import CheckResult, ModePeak
from .dataset import TestData
from .errors import ClientError

if TYPE_CHECKING:
    from matplotlib.figure import Figure

__all__ = ["frf_figure", "shape_figure", "write_plots"]

_DPI = 100
_NEED = "plots need matplotlib: install the extra with  pip install 'taprig[plots]'"


def _figure(width_in: float, height_in: float, fixed: bool = False) -> Figure:
    """A figure on its own Agg canvas; `fixed`: set margins instead of constrained layout
    (a third less time to draw, for figures whose labels are known to fit)."""
    try:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
    except ImportError:
        raise ClientError(_NEED) from None
    fig = Figure(figsize=(width_in, height_in), dpi=_DPI, layout=None if fixed else "constrained")
    FigureCanvasAgg(fig)
    if fixed:
        fig.subplots_adjust(left=0.11, right=0.97, top=0.95, bottom=0.08, hspace=0.12)
    return fig


def _safe(label: str) -> str:
    """A point label as a file-name part."""
    return re.sub(r"[^A-Za-z0-9._-]+", "_", label) or "_"


def frf_figure(
    data: TestData,
    row: int,
    band_hz: tuple[float, float] | None = None,
    f_max_hz: float | None = None,
) -> Figure:
    """|H1| (dB re 1 (m/s²)/N), phase (deg) and coherence of one point.

    Lines above 0 Hz up to `f_max_hz` (None: all); `band_hz` is shaded.
    """
    fig = _figure(8.0, 7.0, fixed=True)
    mag, phase, coh = fig.subplots(3, 1, sharex=True)
    f = data.freq_hz
    keep = (f > 0.0) & (f <= (math.inf if f_max_hz is None else f_max_hz))
    for r, label in enumerate(data.responses):
        h = data.h1[row, r, keep]
        with np.errstate(divide="ignore"):
            mag.plot(f[keep], 20.0 * np.log10(np.abs(h)), lw=0.8, label=label)
        phase.plot(f[keep], np.degrees(np.angle(h)), lw=0.8, label=label)
        coh.plot(f[keep], data.coherence[row, r, keep], lw=0.8, label=label)
    if band_hz is not None:
        for ax in (mag, phase, coh):
            ax.axvspan(*band_hz, color="0.93", zorder=0)
    point = data.points[row]
    mag.set_title(
        f"{data.test}: point {point} (struck {data.drive_points[row]}), "
        f"{int(data.n_averages[row])} averages"
    )
    mag.set_ylabel("|H1| dB re 1 (m/s²)/N")
    phase.set_ylabel("phase, deg")
    phase.set_ylim(-180.0, 180.0)
    phase.set_yticks([-180, -90, 0, 90, 180])
    coh.set_ylabel("coherence")
    coh.set_ylim(0.0, 1.05)
    coh.set_xlabel("frequency, Hz")
    mag.legend(loc="best", fontsize="small")
    for ax in (mag, phase, coh):
        ax.grid(True, lw=0.3)
    return fig


def shape_figure(result: CheckResult, mode: ModePeak, number: int) -> Figure:
    """The deflection shape of one peak over the grid's x, y (mm), labelled."""
    fig = _figure(7.0, 5.5)
    ax = fig.subplots()
    xy = np.array(result.coords, dtype=np.float64).reshape(-1, 3)[:, :2] * 1000.0
    value = np.array(mode.shape, dtype=np.float64)
    sizes = 40.0 + 360.0 * np.abs(value)
    dots = ax.scatter(xy[:, 0], xy[:, 1], c=value, s=sizes, cmap="coolwarm", vmin=-1.0,
                      vmax=1.0, edgecolors="0.3", linewidths=0.5)  # fmt: skip
    for (x, y), label, v in zip(xy, result.points, value, strict=True):
        ax.annotate(f"{label}\n{v:+.2f}", (x, y), textcoords="offset points", xytext=(0, 9),
                    ha="center", fontsize=7)  # fmt: skip
    fig.colorbar(dots, ax=ax, label="Im H1 at the peak, largest = 1")
    q = "-" if not np.isfinite(mode.q) else f"{mode.q:.0f}"
    ax.set_title(
        f"{result.test}: peak {number} at {mode.freq_hz:.1f} Hz, Q {q} (from {mode.response})"
    )
    ax.set_xlabel("x, mm")
    ax.set_ylabel("y, mm")
    ax.set_aspect("equal", adjustable="datalim")
    ax.margins(0.12)
    ax.grid(True, lw=0.3)
    return fig


def write_plots(data: TestData, result: CheckResult, folder: str | Path) -> list[Path]:
    """Write every FRF and shape PNG into `folder` (made if missing); return the paths."""
    out = Path(folder)
    out.mkdir(parents=True, exist_ok=True)
    written = []
    f_max = 2.0 * result.band_hz[1]  # the analysis band and what lies just above it
    for row, point in enumerate(data.points):
        figure = frf_figure(data, row, result.band_hz, f_max)
        written.append(_save(figure, out / f"frf-{_safe(point)}.png"))
    for n, mode in enumerate(result.modes, 1):
        path = out / f"shape-{n:02d}-{mode.freq_hz:.0f}Hz.png"
        written.append(_save(shape_figure(result, mode, n), path))
    return written


def _save(fig: Any, path: Path) -> Path:
    fig.savefig(path, format="png")
    return path
