"""PNG plots of one test: FRFs per point and the deflection shape at each peak.

Entry point: ``write_plots(data, result, folder) -> list[Path]`` writes

* ``frf-<point>.png``, one per measured point: three panels sharing the frequency axis,
  |H1| in dB re 1 (m/s²)/N, the phase of H1 in degrees, and the coherence, one curve per
  response, from 0 Hz to twice the top of the check's analysis band (shaded). One file
  per point keeps each small and lets a reader open just the point that was flagged.
* ``shape-<n>-<freq>Hz.png``, one per peak of the check (`client/check/`): the
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
from .words import extra_hint

if TYPE_CHECKING:
    from matplotlib.figure import Figure

__all__ = ["frf_figure", "shape_figure", "write_plots"]

_DPI = 100
_NEED = f"plots need matplotlib: install the extra with  {extra_hint('plots')}"


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


class _FrfSheet:
    """One FRF figure drawn once and refilled per point: building the axes, ticks and labels
    costs more than drawing the curves, so a test's plots share them."""

    def __init__(
        self, data: TestData, band_hz: tuple[float, float] | None, f_max_hz: float | None
    ) -> None:
        self.data = data
        self.fig = _figure(8.0, 7.0, fixed=True)
        self.mag, self.phase, self.coh = self.fig.subplots(3, 1, sharex=True)
        f = data.freq_hz
        self.keep = (f > 0.0) & (f <= (math.inf if f_max_hz is None else f_max_hz))
        fk = f[self.keep]
        nan = np.full(fk.shape, np.nan)
        axes = (self.mag, self.phase, self.coh)
        self.lines = [
            tuple(ax.plot(fk, nan, lw=0.8, label=label)[0] for ax in axes)
            for label in data.responses
        ]
        if band_hz is not None:
            for ax in (self.mag, self.phase, self.coh):
                ax.axvspan(*band_hz, color="0.93", zorder=0)
        self.mag.set_xlim(fk[0], fk[-1])
        self.mag.set_ylabel("|H1| dB re 1 (m/s²)/N")
        self.phase.set_ylabel("phase, deg")
        self.phase.set_ylim(-180.0, 180.0)
        self.phase.set_yticks([-180, -90, 0, 90, 180])
        self.coh.set_ylabel("coherence")
        self.coh.set_ylim(0.0, 1.05)
        self.coh.set_xlabel("frequency, Hz")
        self.mag.legend(loc="upper right", fontsize="small")
        for ax in (self.mag, self.phase, self.coh):
            ax.grid(True, lw=0.3)

    def show(self, row: int) -> Figure:
        """The figure filled with point `row`'s |H1|, phase and coherence."""
        data = self.data
        for r, (mag, phase, coh) in enumerate(self.lines):
            h = data.h1[row, r, self.keep]
            with np.errstate(divide="ignore"):
                mag.set_ydata(20.0 * np.log10(np.abs(h)))
            phase.set_ydata(np.degrees(np.angle(h)))
            coh.set_ydata(data.coherence[row, r, self.keep])
        self.mag.relim()
        self.mag.autoscale_view(scalex=False)
        self.mag.set_title(
            f"{data.test}: point {data.points[row]} (struck {data.drive_points[row]}), "
            f"{int(data.n_averages[row])} averages"
        )
        return self.fig


def frf_figure(
    data: TestData,
    row: int,
    band_hz: tuple[float, float] | None = None,
    f_max_hz: float | None = None,
) -> Figure:
    """|H1| (dB re 1 (m/s²)/N), phase (deg) and coherence of one point.

    Lines above 0 Hz up to `f_max_hz` (None: all); `band_hz` is shaded.
    """
    return _FrfSheet(data, band_hz, f_max_hz).show(row)


class _ShapeSheet:
    """One shape figure over the grid, refilled per peak (the points and labels stay put)."""

    def __init__(self, result: CheckResult) -> None:
        self.result = result
        self.fig = _figure(7.0, 5.5, fixed=True)
        self.fig.subplots_adjust(left=0.1, right=0.98, top=0.93, bottom=0.1)
        self.ax = ax = self.fig.subplots()
        xy = np.array(result.coords, dtype=np.float64).reshape(-1, 3)[:, :2] * 1000.0
        self.dots = ax.scatter(xy[:, 0], xy[:, 1], c=np.zeros(len(xy)), s=40.0, cmap="coolwarm",
                               vmin=-1.0, vmax=1.0, edgecolors="0.3", linewidths=0.5)  # fmt: skip
        self.notes = [
            ax.annotate("", (x, y), textcoords="offset points", xytext=(0, 9), ha="center",
                        fontsize=7)
            for x, y in xy
        ]
        self.fig.colorbar(self.dots, ax=ax, label="Im H1 at the peak, largest = 1")
        ax.set_xlabel("x, mm")
        ax.set_ylabel("y, mm")
        ax.set_aspect("equal", adjustable="datalim")
        ax.margins(0.12)
        ax.grid(True, lw=0.3)

    def show(self, mode: ModePeak, number: int) -> Figure:
        """The figure filled with one peak's deflection shape."""
        value = np.array(mode.shape, dtype=np.float64)
        self.dots.set_array(value)
        self.dots.set_sizes(40.0 + 360.0 * np.abs(value))
        for note, label, v in zip(self.notes, self.result.points, value, strict=True):
            note.set_text(f"{label}\n{v:+.2f}")
        q = "-" if not np.isfinite(mode.q) else f"{mode.q:.0f}"
        self.ax.set_title(f"{self.result.test}: peak {number} at {mode.freq_hz:.1f} Hz, Q {q} "
                          f"(from {mode.response})")  # fmt: skip
        return self.fig


def shape_figure(result: CheckResult, mode: ModePeak, number: int) -> Figure:
    """The deflection shape of one peak over the grid's x, y (mm), labelled."""
    return _ShapeSheet(result).show(mode, number)


def write_plots(data: TestData, result: CheckResult, folder: str | Path) -> list[Path]:
    """Write every FRF and shape PNG into `folder` (made if missing); return the paths."""
    out = Path(folder)
    out.mkdir(parents=True, exist_ok=True)
    written = []
    f_max = 2.0 * result.band_hz[1]  # the analysis band and what lies just above it
    frf = _FrfSheet(data, result.band_hz, f_max)
    for row, point in enumerate(data.points):
        written.append(_save(frf.show(row), out / f"frf-{_safe(point)}.png"))
    if result.modes:
        shapes = _ShapeSheet(result)
        for n, mode in enumerate(result.modes, 1):
            path = out / f"shape-{n:02d}-{mode.freq_hz:.0f}Hz.png"
            written.append(_save(shapes.show(mode, n), path))
    return written


def _save(fig: Any, path: Path) -> Path:
    # zlib level 1: a third of the time of the default 6 for files about a fifth larger
    fig.savefig(path, format="png", pil_kwargs={"compress_level": 1})
    return path
