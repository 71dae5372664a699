"""The flat multi-face layout: every face laid into one plane, opened out like a book.

Each face is moved rigidly into the plane of the first face. A face that shares an edge
(two points) with a face already laid out turns about that edge, as a page turns about
the spine, until its outward normal matches the laid-out neighbour's; had it landed on top
of that neighbour it turns half a turn further (and is then seen from behind). A face with
no shared edge is laid beside the others, right of them, with a gap. A point on several
faces is drawn once per face, so the layout has its own vertices.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from .geometry import Face, Geometry, plane_of

__all__ = ["FlatLayout", "unfold"]

FloatArray = NDArray[np.float64]
IntArray = NDArray[np.int64]
GAP = 0.08  # between faces laid side by side, as a share of the structure's size


@dataclass(frozen=True, slots=True, eq=False)
class FlatLayout:
    """vertices (V, 2), m in the first face's plane; point (V,) each vertex's point index;
    triangles (T, 3) over vertices; normal (V, 3) the outward unit normal of the vertex's
    face in 3-D (the out-of-face displacement is the displacement dotted with it)."""

    vertices: FloatArray
    point: IntArray
    triangles: IntArray
    normal: FloatArray


def _rotation(axis: FloatArray, angle: float) -> FloatArray:
    """Rodrigues' rotation matrix about unit `axis` by `angle` rad."""
    k = np.array([[0, -axis[2], axis[1]], [axis[2], 0, -axis[0]], [-axis[1], axis[0], 0]])
    out: FloatArray = np.eye(3) + np.sin(angle) * k + (1 - np.cos(angle)) * (k @ k)
    return out


def _hinge(face: Face, done: list[tuple[Face, FloatArray, FloatArray]]) -> tuple[int, int, int]:
    """(index into done, point a, point b) of the first laid-out face sharing an edge."""
    mine = set(face.members.tolist())
    for n, (other, _, _) in enumerate(done):
        shared = sorted(mine & set(other.members.tolist()))
        if len(shared) >= 2:
            return n, shared[0], shared[-1]
    return -1, -1, -1


def _pose(geo: Geometry, face: Face, done: list[tuple[Face, FloatArray, FloatArray]],
          right_edge: float, frame: FloatArray) -> tuple[FloatArray, FloatArray]:  # fmt: skip
    """(R (3, 3), t (3,)) taking the face's 3-D points x to R x + t in the layout plane."""
    xyz = geo.xyz
    n, a, b = _hinge(face, done)
    if n >= 0:
        other, r0, t0 = done[n]
        axis = (xyz[b] - xyz[a]) / np.linalg.norm(xyz[b] - xyz[a])
        angle = float(np.arctan2(axis @ np.cross(face.normal, other.normal),
                                 face.normal @ other.normal))  # fmt: skip
        mine, theirs = xyz[face.members].mean(axis=0), xyz[other.members].mean(axis=0)
        for turn in (angle, angle + np.pi):
            q = _rotation(axis, turn)
            r, t = r0 @ q, r0 @ (xyz[a] - q @ xyz[a]) + t0
            side = np.cross(axis, other.normal)  # in the neighbour's plane, across the hinge
            here = (q @ (mine - xyz[a])) @ side
            if here * ((theirs - xyz[a]) @ side) <= 0:
                return r, t
        return r, t
    # no hinge: turn the face's own frame onto the first face's, then move it right
    _, own, _ = plane_of(xyz[face.members])
    own[2] = face.normal
    own[1] = np.cross(own[2], own[0])
    r = frame.T @ own
    flat = (xyz[face.members] @ r.T) @ frame[:2].T
    shift = right_edge - flat[:, 0].min() if done else -flat[:, 0].min()
    t = frame[0] * shift - frame[1] * flat[:, 1].min()
    return r, t


def unfold(geo: Geometry) -> FlatLayout:
    """The geometry's faces laid flat (see the module docstring); no faces: an empty layout."""
    if not geo.faces:
        return FlatLayout(np.empty((0, 2)), np.empty(0, dtype=np.int64),
                          np.empty((0, 3), dtype=np.int64), np.empty((0, 3)))  # fmt: skip
    _, frame, _ = plane_of(geo.xyz[geo.faces[0].members])
    frame[2] = geo.faces[0].normal
    frame[1] = np.cross(frame[2], frame[0])
    done: list[tuple[Face, FloatArray, FloatArray]] = []
    verts, points, tris, normals = [], [], [], []
    right, count = 0.0, 0
    for face in geo.faces:
        r, t = _pose(geo, face, done, right + GAP * geo.size_m, frame)
        done.append((face, r, t))
        members = face.members
        flat = (geo.xyz[members] @ r.T + t) @ frame[:2].T
        right = max(right, float(flat[:, 0].max()))
        remap = np.full(len(geo.labels), -1, dtype=np.int64)
        remap[members] = np.arange(count, count + len(members))
        verts.append(flat)
        points.append(members)
        tris.append(remap[face.triangles])
        normals.append(np.tile(face.normal, (len(members), 1)))
        count += len(members)
    return FlatLayout(np.concatenate(verts), np.concatenate(points).astype(np.int64),
                      np.concatenate(tris), np.concatenate(normals))  # fmt: skip
