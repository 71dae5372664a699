"""A structure's geometry for drawing shapes: points, faces made of triangles, lines.

`Geometry` is plain data (arrays in a frozen dataclass) with `to_dict` / `from_dict`, so it
can travel with a test (rig → point sets → mirror → export) as JSON. Point order is free:
drawing code maps a mode shape's point labels onto `labels`.

Faces: each face is a named set of triangles over point indices. A face given only as a set
of points is triangulated here, in the face's own plane (`triangulate`: the plane through
the points by least squares, Delaunay (scipy.spatial.Delaunay, Qhull) on the in-plane
coordinates). Each face carries its unit normal, oriented so that it agrees with the
measured directions of its points ("+z out of each face").
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from taprig.schema.outline import PLANAR_TOLERANCE, OutlineError, in_plane, plane_of

from ..errors import ClientError

__all__ = [
    "Face",
    "Geometry",
    "GeometryError",
    "direction_vector",
    "from_grid",
    "plane_of",
    "triangulate",
]

FloatArray = NDArray[np.float64]
IntArray = NDArray[np.int64]

_AXES = {"x": 0, "y": 1, "z": 2}


class GeometryError(ClientError):
    """A geometry that cannot be drawn: unknown point, degenerate or empty face, bad line."""

    exit_code = 2


@dataclass(frozen=True, slots=True, eq=False)
class Face:
    """One named face: triangles (T, 3) of point indices into `Geometry.labels`; normal (3,),
    a unit vector out of the face; given: whether the triangles came from the user (else
    from `triangulate`)."""

    name: str
    triangles: IntArray
    normal: FloatArray
    given: bool = False

    @property
    def members(self) -> IntArray:
        """The face's point indices, sorted, each once."""
        out: IntArray = np.unique(self.triangles)
        return out


@dataclass(frozen=True, slots=True, eq=False)
class Geometry:
    """Points, faces and lines of a structure.

    labels: (P,) point labels; xyz: (P, 3) float64, m; directions: (P, 3) float64, the unit
    vector each point's measurement is taken along (from "+z", "-x", ...); faces: the named
    faces; lines: (L, 2) int64 point-index pairs drawn as segments.
    """

    labels: tuple[str, ...]
    xyz: FloatArray
    directions: FloatArray
    faces: tuple[Face, ...]
    lines: IntArray

    def index(self, label: str) -> int:
        """The row of point `label`; GeometryError when unknown."""
        try:
            return self.labels.index(label)
        except ValueError:
            raise GeometryError(f"unknown point {label!r}") from None

    @property
    def triangles(self) -> IntArray:
        """All faces' triangles stacked, (T, 3)."""
        if not self.faces:
            return np.empty((0, 3), dtype=np.int64)
        out: IntArray = np.concatenate([f.triangles for f in self.faces])
        return out

    @property
    def size_m(self) -> float:
        """The bounding box's diagonal, m (1 for a single point)."""
        span = float(np.linalg.norm(self.xyz.max(axis=0) - self.xyz.min(axis=0)))
        return span if span > 0 else 1.0

    def to_dict(self) -> dict[str, Any]:
        """A JSON-able dict; `from_dict` reads it back exactly (coordinates as floats)."""
        return {
            "points": [
                {"label": lab, "xyz": [float(v) for v in p], "direction": [float(v) for v in d]}
                for lab, p, d in zip(self.labels, self.xyz, self.directions, strict=True)
            ],
            "faces": [
                {
                    "name": f.name,
                    "triangles": f.triangles.tolist(),
                    "normal": [float(v) for v in f.normal],
                    "given": f.given,
                }
                for f in self.faces
            ],
            "lines": self.lines.tolist(),
        }

    @classmethod
    def from_dict(cls, obj: dict[str, Any]) -> Geometry:
        """The geometry `to_dict` wrote; GeometryError naming what is wrong otherwise."""
        try:
            points = obj["points"]
            labels = tuple(str(p["label"]) for p in points)
            xyz = np.array([p["xyz"] for p in points], dtype=np.float64).reshape(-1, 3)
            dirs = np.array([p["direction"] for p in points], dtype=np.float64).reshape(-1, 3)
            faces = tuple(
                Face(str(f["name"]), _index_array(f["triangles"], 3),
                     np.array(f["normal"], dtype=np.float64), bool(f.get("given", False)))
                for f in obj.get("faces", [])
            )  # fmt: skip
            lines = _index_array(obj.get("lines", []), 2)
        except (KeyError, TypeError, ValueError) as exc:
            raise GeometryError(f"not a geometry: {exc}") from None
        geo = cls(labels, xyz, dirs, faces, lines)
        for f in faces:
            if f.triangles.size and (f.triangles.min() < 0 or f.triangles.max() >= len(labels)):
                raise GeometryError(f"face {f.name!r}: a triangle names a point not in the list")
        return geo


def _index_array(rows: Sequence[Sequence[int]], width: int) -> IntArray:
    out: IntArray = np.array(rows, dtype=np.int64).reshape(-1, width)
    return out


def direction_vector(direction: str) -> FloatArray:
    """The unit vector of "+x", "-y", "+z", ...; GeometryError otherwise."""
    if len(direction) != 2 or direction[0] not in "+-" or direction[1] not in _AXES:
        raise GeometryError(f"direction {direction!r} is not one of +x -x +y -y +z -z")
    v = np.zeros(3)
    v[_AXES[direction[1]]] = 1.0 if direction[0] == "+" else -1.0
    return v


def triangulate(name: str, xyz: FloatArray, members: IntArray) -> IntArray:
    """Triangles (T, 3) over `members` (indices into `xyz`, (P, 3) m) of a planar face.

    Delaunay triangulation (scipy.spatial.Delaunay) of the points' coordinates in the face's
    own plane (`plane_of`); slivers of zero area (collinear points on the hull) are dropped.
    GeometryError when the face has fewer than three points, they are collinear, or they
    do not lie in one plane within PLANAR_TOLERANCE of the face's size.
    """
    from scipy.spatial import Delaunay, QhullError

    try:
        local = in_plane(name, xyz[members])
    except OutlineError as exc:
        raise GeometryError(str(exc)) from None
    extent = np.ptp(local, axis=0)
    try:
        simplices = Delaunay(local).simplices
    except QhullError as exc:  # coincident points and the like
        raise GeometryError(f"face {name!r} cannot be triangulated: {exc}".split("\n")[0]) from None
    tri = local[simplices]
    u, v = tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0]
    area = np.abs(u[:, 0] * v[:, 1] - u[:, 1] * v[:, 0]) / 2
    keep = area > 1e-12 * float(extent.max()) ** 2
    out: IntArray = members[simplices[keep]].astype(np.int64)
    return out


def face_normal(xyz: FloatArray, directions: FloatArray, triangles: IntArray) -> FloatArray:
    """The unit normal of a face's triangles, turned to agree with its points' directions.

    "+z out of each face": the normal points the way the measured directions of the face's
    points point on average (if they are all in-plane, the plane's own orientation stays).
    """
    members = np.unique(triangles)
    _, frame, _ = plane_of(xyz[members])
    normal = frame[2]
    if float(directions[members].sum(axis=0) @ normal) < 0:
        normal = -normal
    out: FloatArray = normal
    return out


def from_grid(grid: Sequence[tuple[str, float, float, float, str]], face: str = "grid") -> Geometry:
    """The default geometry of a test's grid (label, x, y, z m, direction): its points and
    one face over all of them, triangulated when they span a plane (else points only)."""
    labels = tuple(row[0] for row in grid)
    xyz = np.array([row[1:4] for row in grid], dtype=np.float64).reshape(-1, 3)
    dirs = np.array([direction_vector(row[4]) for row in grid]).reshape(-1, 3)
    faces: tuple[Face, ...] = ()
    members = np.arange(len(labels), dtype=np.int64)
    if len(labels) >= 3 and plane_of(xyz)[2] <= PLANAR_TOLERANCE:
        try:
            tri = triangulate(face, xyz, members)
        except GeometryError:  # collinear grid: points and no surface
            tri = np.empty((0, 3), dtype=np.int64)
        if len(tri):
            faces = (Face(face, tri, face_normal(xyz, dirs, tri)),)
    return Geometry(labels, xyz, dirs, faces, np.empty((0, 2), dtype=np.int64))
