"""Pictures of the modes for reports: one animated GIF per mode and one PNG sheet of all.

Entry point: ``write_mode_pictures(data, modes, geometry, folder) -> list[Path]`` writes

* ``mode-<n>-<f>Hz.gif``: the mode moving on the structure through one cycle in `frames`
  frames (FRAMES, at DPI), a fixed oblique view of the 3-D geometry, faces coloured by
  displacement, nodal lines in black (scene.py draws them);
* ``modes-sheet.png``: every mode at its largest deflection, side by side.

Every picture carries the test's name and date, the mode's frequency (Hz) and damping
ratio (%), where the modes come from (a fit, or the quick-look peaks), and the point labels
when there are at most `LABELS_UP_TO` points. The fit command can call the same function.
matplotlib (the ``plots`` extra) is imported only inside these functions, as in plots.py.

Speed: one figure serves every mode's GIF. Its colour bar, labels and rest mesh are drawn
once for all of them, each mode adds its title over that, and each frame restores the
result and draws only the moving artists over it (matplotlib's blitting: Agg's
``copy_from_bbox``/``restore_region`` and ``draw_artist``); Pillow writes the frames with
one palette made from the first (no dithering: flat colours stay flat).
tests/bench/bench_view.py times it per mode.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..dataset import TestData
from ..plots import _figure
from .geometry import Geometry
from .modes import ModeSet
from .payload import normalise, spread
from .scene import Scene, deformed

__all__ = [
    "DPI",
    "FRAMES",
    "LABELS_UP_TO",
    "deformed",
    "write_mode_pictures",
    "write_model_pictures",
]

LABELS_UP_TO = 60
FRAMES = 24  # frames per cycle of a mode's GIF
DPI = 100  # the GIF's resolution: 640 × 520 pixels
FPS = 12  # GIF frames a second: one cycle in 2 s


def _caption(data: TestData, modes: ModeSet, m: int) -> str:
    zeta = modes.damping_ratio[m]
    z = f"{100 * zeta:.2f} %" if np.isfinite(zeta) else "–"
    return f"mode {m + 1}: {modes.freq_hz[m]:.1f} Hz, ζ {z}"


def _heading(data: TestData, modes: ModeSet) -> str:
    done = sorted(t for t in data.completed_utc if t)
    date = done[-1][:10] if done else "date unknown"
    return f"{data.test} · {date} · modes from {modes.label}"


class _Movie:
    """The figure of the GIFs of one test's modes, made once: titles aside, every mode's
    picture has the same background (the colour bar, labels and rest mesh), so it is drawn
    once and each mode only adds its title over it."""

    def __init__(self, data: TestData, modes: ModeSet, geometry: Geometry,
                 phi: NDArray[np.complex128]) -> None:  # fmt: skip
        self.data, self.modes, self.geometry = data, modes, geometry
        self.fig = fig = _figure(6.4, 5.2, fixed=True)
        fig.set_dpi(DPI)
        self.ax = ax = fig.add_axes((0.02, 0.02, 0.8, 0.84))
        bar = fig.add_axes((0.86, 0.2, 0.025, 0.5))
        self.scene = Scene(ax, geometry, phi, len(geometry.labels) <= LABELS_UP_TO, animated=True)
        fig.colorbar(self.scene.mappable, cax=bar,
                     label="displacement along the point's direction, largest = 1")  # fmt: skip
        self.title = fig.suptitle("", fontsize=8, animated=True)
        self.canvas = canvas = fig.canvas
        canvas.draw()  # everything but the title, the moving artists and the labels
        self.blank = canvas.copy_from_bbox(fig.bbox)  # type: ignore[attr-defined]
        canvas.get_renderer().clear()  # type: ignore[attr-defined]  # transparent
        for label in self.scene.labels:  # drawn once, laid over every frame
            ax.draw_artist(label)
        self.labels = _rgba(canvas).copy()

    def write(self, phi: NDArray[np.complex128], m: int, path: Path, frames: int) -> Path:
        """Mode `m` (shape `phi`) through one cycle of `frames` frames, as a GIF at `path`."""
        from PIL import Image

        self.scene.set_shape(phi)
        self.title.set_text(f"{_heading(self.data, self.modes)}\n"
                            f"{_caption(self.data, self.modes, m)} (deflection exaggerated; "
                            f"structure {self.geometry.size_m:.2f} m across)")  # fmt: skip
        canvas = self.canvas
        canvas.restore_region(self.blank)  # type: ignore[attr-defined]
        self.fig.draw_artist(self.title)
        background = canvas.copy_from_bbox(self.fig.bbox)  # type: ignore[attr-defined]
        images = []
        for k in range(frames):
            canvas.restore_region(background)  # type: ignore[attr-defined]
            for artist in self.scene.show(2 * math.pi * k / frames):
                self.ax.draw_artist(artist)
            frame = _rgba(canvas)
            if self.scene.labels:
                frame = Image.alpha_composite(frame, self.labels)
            images.append(frame.convert("RGB"))
        _write_gif(images, path)
        return path


def _gif(data: TestData, modes: ModeSet, geometry: Geometry, phi: NDArray[np.complex128],
         m: int, path: Path, frames: int) -> Path:  # fmt: skip
    """One mode's GIF on a figure of its own (write_mode_pictures shares one)."""
    return _Movie(data, modes, geometry, phi).write(phi, m, path, frames)


def _rgba(canvas: Any) -> Any:
    """The canvas's pixels as a Pillow RGBA image, read in place."""
    from PIL import Image

    width, height = canvas.get_width_height()
    return Image.frombuffer("RGBA", (width, height), canvas.buffer_rgba(), "raw", "RGBA", 0, 1)


def _write_gif(images: list[Any], path: Path) -> None:
    """Frames into one looping GIF, all on the first frame's palette (made once)."""
    from PIL import Image

    first = images[0].quantize(colors=255, method=Image.Quantize.MEDIANCUT)
    rest = [im.quantize(palette=first, dither=Image.Dither.NONE) for im in images[1:]]
    first.save(path, save_all=True, append_images=rest, duration=round(1000 / FPS), loop=0)


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
        Scene(ax, geometry, shapes[m], labels and m == 0)  # the points named once
        ax.set_title(_caption(data, modes, m), fontsize=9)
    fig.suptitle(f"{_heading(data, modes)}\ncolour: displacement along each point's direction "
                 "(teal −, rust +, largest = 1); black: nodal lines", fontsize=9)  # fmt: skip
    fig.savefig(path, format="png", dpi=90)
    return path


def write_mode_pictures(data: TestData, modes: ModeSet, geometry: Geometry,
                        folder: str | Path, frames: int = FRAMES) -> list[Path]:  # fmt: skip
    """Write one GIF per mode (`frames` frames a cycle) and the PNG sheet into `folder`
    (made if missing); the paths written, GIFs first."""
    out = Path(folder)
    out.mkdir(parents=True, exist_ok=True)
    shapes = normalise(spread(modes.shape, modes.point, geometry))
    movie = _Movie(data, modes, geometry, shapes[0]) if len(modes) else None
    written = [
        movie.write(shapes[m], m, out / f"mode-{m + 1:02d}-{modes.freq_hz[m]:.0f}Hz.gif",
                    frames)
        for m in range(len(modes)) if movie is not None
    ]  # fmt: skip
    written.append(_sheet(data, modes, geometry, shapes, out / "modes-sheet.png"))
    return written


def write_model_pictures(data: TestData, model: Any, folder: str | Path) -> list[Path]:
    """`write_mode_pictures` of a fitted modal model (client/modal's ModalModel) of `data`,
    on the geometry the model carries (else the test's own: its outline, else its grid)."""
    from .geometry import Geometry as Shape
    from .modes import from_model
    from .outline import geometry_of

    geometry = Shape.from_dict(model.geometry) if model.geometry else geometry_of(data)
    return write_mode_pictures(data, from_model(model, data), geometry, folder)
