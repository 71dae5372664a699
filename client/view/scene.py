"""One mode drawn on the structure in a matplotlib axes, made once and moved frame by frame.

`Scene(ax, geometry, phi, labels)` builds every artist a picture of the mode needs, in the
fixed oblique view the page opens with: the faces (one polygon per triangle, coloured by
displacement, drawn far to near), the nodal lines, the outline's lines, the points, their
labels (where the points are at rest) and the undeformed mesh (dotted). `show(phase)`
moves the moving ones to the phase θ (rad) of the cycle and returns them, so a caller can
draw only those over a background rendered once (pictures.py does, for the GIFs).

Nodal lines are found as the page finds them (web/shape.js): on each triangle, the zero of
Re φ by linear interpolation along the edges whose ends differ in sign; a triangle with two
such edges holds one segment. The crossings are found once per mode; a frame only moves
their ends with the deformed triangle.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import NDArray

from .geometry import Geometry
from .payload import AMPLITUDE_SHARE

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.colors import Colormap

__all__ = ["SCALE", "Scene", "deformed", "nodal_crossings"]

YAW, PITCH = -0.6, 0.75  # rad: the oblique view the page also opens with
# The page's diverging scale (web/palette.js): deep teal, pale sand, rust.
SCALE = ((22 / 255, 92 / 255, 107 / 255), (238 / 255, 229 / 255, 205 / 255),
         (176 / 255, 64 / 255, 38 / 255))  # fmt: skip
INK = "#1f2b30"
DOTS_UP_TO = 120  # points drawn as rimmed dots up to this many
FloatArray = NDArray[np.float64]
IntArray = NDArray[np.int64]
_EDGES = np.array([[0, 1], [1, 2], [2, 0]])


def deformed(
    geometry: Geometry, phi: NDArray[np.complex128], phase: float, amp: float
) -> FloatArray:
    """Positions (G, 3), m: x + amp·scale·Re(φ e^{iθ})·direction, scale = AMPLITUDE_SHARE
    of the structure's size, φ over the geometry's points (largest magnitude 1)."""
    value = (phi * np.exp(1j * phase)).real
    scale = AMPLITUDE_SHARE * geometry.size_m
    out: FloatArray = geometry.xyz + amp * scale * value[:, None] * geometry.directions
    return out


def project(xyz: FloatArray, centre: FloatArray) -> FloatArray:
    """Screen x, y and depth (N, 3) of the page's orthographic view (web/shape.js)."""
    x, y, z = (xyz - centre).T
    a = math.cos(YAW) * x - math.sin(YAW) * y
    b = math.sin(YAW) * x + math.cos(YAW) * y
    return np.stack([a, math.cos(PITCH) * z + math.sin(PITCH) * b,
                     math.sin(PITCH) * z - math.cos(PITCH) * b], axis=1)  # fmt: skip


def nodal_crossings(triangles: IntArray, value: FloatArray) -> tuple[IntArray, FloatArray]:
    """Where the zero of `value` (G,) crosses the triangles (T, 3): ends (S, 2, 2), the point
    pair of the edge each end of each segment lies on, and t (S, 2), how far along it
    (end = p_a + t (p_b − p_a)). S segments, one per triangle with two edges changing sign."""
    # A point exactly on the zero (a grid line on a nodal line) counts as just above it, so
    # the line runs on through the triangles either side instead of breaking there.
    tiny = 1e-9 * float(np.abs(value).max(initial=0.0))
    value = np.where(np.abs(value) <= tiny, tiny, value)
    edges = triangles[:, _EDGES]  # (T, 3, 2)
    va, vb = value[edges[..., 0]], value[edges[..., 1]]
    crossed = va * vb < 0
    two = crossed.sum(axis=1) == 2
    which = np.argsort(~crossed[two], axis=1, kind="stable")[:, :2]  # the two crossed edges
    rows = np.arange(int(two.sum()))[:, None]
    ends: IntArray = edges[two][rows, which]  # (S, 2, 2)
    a, b = va[two][rows, which], vb[two][rows, which]
    t: FloatArray = a / (a - b)
    return ends, t


def colormap() -> Colormap:
    from matplotlib.colors import LinearSegmentedColormap

    return LinearSegmentedColormap.from_list("taprig-signed", list(SCALE))


class Scene:
    """The artists of one mode on `ax`; `animated`: the moving ones are left out of a full
    draw (the caller draws them with `ax.draw_artist` over a saved background)."""

    def __init__(self, ax: Axes, geometry: Geometry, phi: NDArray[np.complex128], labels: bool,
                 animated: bool = False) -> None:  # fmt: skip
        from matplotlib.collections import LineCollection, PathCollection
        from matplotlib.path import Path

        self.geometry = geometry
        self.centre = geometry.xyz.mean(axis=0)
        self.tri = geometry.triangles
        rest = project(geometry.xyz, self.centre)
        ax.set_axis_off()
        ax.set_aspect("equal")
        lim = 0.62 * geometry.size_m
        ax.set_xlim(-lim, lim)
        ax.set_ylim(-lim, lim)
        edges: Any = rest[self.tri[:, _EDGES], :2].reshape(-1, 2, 2)
        ax.add_collection(LineCollection(edges, colors="0.75", linewidths=0.4, linestyles=":"))
        style: dict[str, Any] = {"cmap": colormap(), "animated": animated}
        # Filled without antialiasing or edges: neighbouring triangles then meet without
        # seams. One closed path per triangle, made once, each a view of its rows of
        # `corners` (T, 4, 2): a frame rewrites the array in one step, not path by path.
        self.corners = np.zeros((len(self.tri), 4, 2))
        paths = [Path(c, closed=True) for c in self.corners]
        self.faces = PathCollection(paths, linewidths=0.0, antialiaseds=False, **style)
        self.faces.set_clim(-1.0, 1.0)
        # Round caps: a nodal line is many short segments end to end, seamless with them;
        # drawn over the points too (those on the line are pale: they would break it).
        self.nodal = LineCollection([], colors="black", linewidths=1.6, capstyle="round",
                                    zorder=4, animated=animated)  # fmt: skip
        self.struts = LineCollection([], colors=INK, linewidths=1.2, animated=animated)
        few = len(rest) <= DOTS_UP_TO  # more points: small dots without a rim
        self.dots = ax.scatter(rest[:, 0], rest[:, 1], c=np.zeros(len(rest)), vmin=-1, vmax=1,
                               s=10 if few else 2, edgecolors=INK if few else "none",
                               linewidths=0.5, zorder=3, **style)  # fmt: skip
        for artist in (self.faces, self.nodal, self.struts):
            ax.add_collection(artist)
        # Labels at the points' places at rest, drawn over the faces (so moving, with them).
        self.labels = [ax.annotate(label, (x, y), xytext=(3, 3), textcoords="offset points",
                                   fontsize=6, color="0.25", animated=animated)
                       for (x, y, _), label in zip(rest, geometry.labels, strict=True)
                       if labels]  # fmt: skip
        self.set_shape(phi)

    def set_shape(self, phi: NDArray[np.complex128]) -> None:
        """Show another shape φ over the same geometry (largest magnitude 1), at phase 0;
        the artists stay, so a picture of the next mode needs no new figure."""
        self.phi = phi
        self.ends, self.t = nodal_crossings(self.tri, phi.real)
        self.show(0.0)

    @property
    def mappable(self) -> Any:
        """What a colour bar follows: the faces, or the points when there are none."""
        return self.faces if len(self.tri) else self.dots

    def show(self, phase: float) -> list[Any]:
        """Move the moving artists to phase θ (rad); returns them, in drawing order (the
        labels, which stay, are drawn over them: `labels`)."""
        value = (self.phi * np.exp(1j * phase)).real
        screen = project(deformed(self.geometry, self.phi, phase, 1.0), self.centre)
        order = np.argsort(-screen[self.tri, 2].sum(axis=1))  # far to near
        self.corners[:] = screen[self.tri[order][:, [0, 1, 2, 0]], :2]  # closed triangles
        self.faces.stale = True
        self.faces.set_array(value[self.tri[order]].mean(axis=1))
        pa, pb = screen[self.ends[..., 0], :2], screen[self.ends[..., 1], :2]
        nodal: Any = pa + self.t[..., None] * (pb - pa)
        struts: Any = screen[self.geometry.lines, :2]
        self.nodal.set_segments(nodal)
        self.struts.set_segments(struts)
        self.dots.set_offsets(screen[:, :2])
        self.dots.set_array(value)
        return [self.faces, self.struts, self.dots, self.nodal]
