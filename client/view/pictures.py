"""Pictures of the modes for reports: one animated GIF per mode and one PNG sheet of all.

Entry point: ``write_mode_pictures(data, modes, geometry, folder) -> list[Path]`` writes

* ``mode-<n>-<f>Hz.gif``: the mode moving on the structure through one cycle in `frames`
  frames (matplotlib.animation with its Pillow writer), a fixed oblique view of the 3-D
  geometry, faces coloured by displacement, nodal lines in black;
* ``modes-sheet.png``: every mode at its largest deflection, side by side.

Every picture carries the test's name and date, the mode's frequency (Hz) and damping
ratio (%), where the modes come from (a fit, or the quick-look peaks), and the point labels
when there are at most `LABELS_UP_TO` points. The fit command can call the same function.
matplotlib (the ``plots`` extra) is imported only inside these functions, as in plots.py.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import NDArray

from ..dataset import TestData
from ..plots import _figure
from .geometry import Geometry
from .modes import ModeSet
from .payload import AMPLITUDE_SHARE, normalise, spread

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.colors import Colormap

__all__ = ["LABELS_UP_TO", "deformed", "write_mode_pictures"]

LABELS_UP_TO = 60
YAW, PITCH = -0.6, 0.75  # rad: the oblique view the page also opens with
# The page's diverging scale (web/palette.js): deep teal, pale sand, rust.
SCALE = ((22 / 255, 92 / 255, 107 / 255), (238 / 255, 229 / 255, 205 / 255),
         (176 / 255, 64 / 255, 38 / 255))  # fmt: skip
FloatArray = NDArray[np.float64]


def deformed(
    geometry: Geometry, phi: NDArray[np.complex128], phase: float, amp: float
) -> FloatArray:
    """Positions (G, 3), m: x + amp·scale·Re(φ e^{iθ})·direction, scale = AMPLITUDE_SHARE
    of the structure's size, φ over the geometry's points (largest magnitude 1)."""
    value = (phi * np.exp(1j * phase)).real
    scale = AMPLITUDE_SHARE * geometry.size_m
    out: FloatArray = geometry.xyz + amp * scale * value[:, None] * geometry.directions
    return out


def _project(xyz: FloatArray, centre: FloatArray) -> FloatArray:
    """Screen x, y and depth (N, 3) of the page's orthographic view (web/shape.js)."""
    x, y, z = (xyz - centre).T
    a = math.cos(YAW) * x - math.sin(YAW) * y
    b = math.sin(YAW) * x + math.cos(YAW) * y
    return np.stack([a, math.cos(PITCH) * z + math.sin(PITCH) * b,
                     math.sin(PITCH) * z - math.cos(PITCH) * b], axis=1)  # fmt: skip


def _colormap() -> Colormap:
    from matplotlib.colors import LinearSegmentedColormap

    return LinearSegmentedColormap.from_list("taprig-signed", list(SCALE))


def _draw(ax: Axes, geometry: Geometry, phi: NDArray[np.complex128], phase: float,
          labels: bool) -> Any:  # fmt: skip
    """One frame on `ax`: faces far to near, coloured; nodal lines; points; the mappable."""
    centre = geometry.xyz.mean(axis=0)
    rest = _project(geometry.xyz, centre)
    screen = _project(deformed(geometry, phi, phase, 1.0), centre)
    value = (phi * np.exp(1j * phase)).real
    ax.clear()
    ax.set_axis_off()
    ax.set_aspect("equal")
    lim = 0.62 * geometry.size_m
    ax.set_xlim(-lim, lim)
    ax.set_ylim(-lim, lim)
    tri = geometry.triangles
    mappable = None
    if len(tri):
        from matplotlib.tri import Triangulation

        order = np.argsort(-screen[tri, 2].sum(axis=1))
        mesh = Triangulation(screen[:, 0], screen[:, 1], tri[order])
        mappable = ax.tripcolor(mesh, facecolors=value[tri[order]].mean(axis=1), cmap=_colormap(),
                                vmin=-1, vmax=1, edgecolors="face", linewidth=0.3)  # fmt: skip
        ax.triplot(Triangulation(rest[:, 0], rest[:, 1], tri), color="0.75", lw=0.4, ls=":")
        re = phi.real
        if re.min() < 0 < re.max():
            ax.tricontour(mesh, re, levels=[0.0], colors="black", linewidths=1.6)
    for a, b in geometry.lines:
        ax.plot(screen[[a, b], 0], screen[[a, b], 1], color="#1f2b30", lw=1.2)
    dots = ax.scatter(screen[:, 0], screen[:, 1], c=value, cmap=_colormap(), vmin=-1, vmax=1,
                      s=10, edgecolors="#1f2b30", linewidths=0.5, zorder=3)  # fmt: skip
    if labels:
        for (x, y, _), label in zip(screen, geometry.labels, strict=True):
            ax.annotate(label, (x, y), xytext=(3, 3), textcoords="offset points", fontsize=6)
    return mappable if mappable is not None else dots


def _caption(data: TestData, modes: ModeSet, m: int) -> str:
    zeta = modes.damping_ratio[m]
    z = f"{100 * zeta:.2f} %" if np.isfinite(zeta) else "–"
    return f"mode {m + 1}: {modes.freq_hz[m]:.1f} Hz, ζ {z}"


def _heading(data: TestData, modes: ModeSet) -> str:
    done = sorted(t for t in data.completed_utc if t)
    date = done[-1][:10] if done else "date unknown"
    return f"{data.test} · {date} · modes from {modes.label}"


def _gif(data: TestData, modes: ModeSet, geometry: Geometry, phi: NDArray[np.complex128],
         m: int, path: Path, frames: int) -> Path:  # fmt: skip
    from matplotlib.animation import PillowWriter

    fig = _figure(6.4, 5.2, fixed=True)
    fig.subplots_adjust(left=0.02, right=0.86, top=0.88, bottom=0.02)
    ax = fig.add_axes((0.02, 0.02, 0.8, 0.84))
    bar = fig.add_axes((0.86, 0.2, 0.025, 0.5))
    labels = len(geometry.labels) <= LABELS_UP_TO
    fig.colorbar(_draw(ax, geometry, phi, 0.0, labels), cax=bar,
                 label="displacement along the point's direction, largest = 1")  # fmt: skip
    fig.suptitle(f"{_heading(data, modes)}\n{_caption(data, modes, m)} "
                 f"(deflection exaggerated; structure {geometry.size_m:.2f} m across)",
                 fontsize=8)  # fmt: skip
    # The writer grabs one frame per draw: one draw per frame, not FuncAnimation's three.
    writer = PillowWriter(fps=12)
    with writer.saving(fig, str(path), dpi=80):
        for k in range(frames):
            _draw(ax, geometry, phi, 2 * math.pi * k / frames, labels)
            writer.grab_frame()
    return path


def _sheet(data: TestData, modes: ModeSet, geometry: Geometry, shapes: NDArray[np.complex128],
           path: Path) -> Path:  # fmt: skip
    cols = min(4, max(1, len(modes)))
    rows = max(1, math.ceil(len(modes) / cols))
    fig = _figure(3.2 * cols, 3.0 * rows + 0.6, fixed=True)
    fig.subplots_adjust(left=0.01, right=0.99, bottom=0.01, top=1 - 0.7 / (3.0 * rows + 0.6),
                        wspace=0.05, hspace=0.15)  # fmt: skip
    axes = np.atleast_1d(fig.subplots(rows, cols)).ravel()
    labels = len(geometry.labels) <= LABELS_UP_TO // 2
    for m, ax in enumerate(axes):
        if m >= len(modes):
            ax.set_axis_off()
            continue
        _draw(ax, geometry, shapes[m], 0.0, labels)
        ax.set_title(_caption(data, modes, m), fontsize=9)
    fig.suptitle(f"{_heading(data, modes)}\ncolour: displacement along each point's direction "
                 "(teal −, rust +, largest = 1); black: nodal lines", fontsize=9)  # fmt: skip
    fig.savefig(path, format="png", dpi=90)
    return path


def write_mode_pictures(data: TestData, modes: ModeSet, geometry: Geometry,
                        folder: str | Path, frames: int = 16) -> list[Path]:  # fmt: skip
    """Write one GIF per mode (`frames` frames a cycle) and the PNG sheet into `folder`
    (made if missing); the paths written, GIFs first."""
    out = Path(folder)
    out.mkdir(parents=True, exist_ok=True)
    shapes = normalise(spread(modes.shape, modes.point, geometry))
    written = [
        _gif(data, modes, geometry, shapes[m], m,
             out / f"mode-{m + 1:02d}-{modes.freq_hz[m]:.0f}Hz.gif", frames)
        for m in range(len(modes))
    ]  # fmt: skip
    written.append(_sheet(data, modes, geometry, shapes, out / "modes-sheet.png"))
    return written
