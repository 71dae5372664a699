"""The outline file: a test's faces and lines in a small text format of our own.

Both sides read it: the rig checks an outline at its door (with the grid it comes with) and
keeps its text in the test's metadata under `META_KEY`; the workstation turns the same text
into surfaces it can draw (client/view/outline.py triangulates the faces given as points).

One record per line; ``#`` starts a comment; words are separated by blanks. Labels are the
test grid's point labels (or points the file adds)::

    # the top and the back of a box-shaped body
    point  R1  0.0  0.40 -0.10  +y   # adds a point: label, x y z in m, direction (default +z)
    face   top                       # starts a face; the records below belong to it
    points A1 A2 A3 B1 B2 B3         # its points: triangulated in its plane, or
    quad   A1 A2 B2 B1               # give its surfaces: quads (split along A1-B2) and
    tri    A2 A3 B2                  # triangles
    line   A1 A3 R1                  # a polyline joining points (anywhere in the file)

A face with ``tri``/``quad`` records uses exactly those; a face with only ``points`` is
triangulated in its own plane. Errors name the source and the line: unknown point, unknown
record, a degenerate surface (a repeated point or no area), a face with no points, a face
given as points that are too few, on one line, or not in one plane.
"""

from __future__ import annotations

import itertools
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any, Final

import numpy as np
from numpy.typing import NDArray

__all__ = [
    "DIRECTIONS",
    "MAX_CHARS",
    "META_KEY",
    "PLANAR_TOLERANCE",
    "Outline",
    "OutlineError",
    "OutlineFace",
    "in_plane",
    "outline_of",
    "parse_outline",
    "plane_of",
]

META_KEY: Final = "outline"  # the test's meta key that holds the outline's text
MAX_CHARS: Final = 1 << 20  # the longest outline text a rig takes, characters
PLANAR_TOLERANCE: Final = 1e-3  # largest distance from a face's plane, share of its size
DIRECTIONS: Final = ("+x", "-x", "+y", "-y", "+z", "-z")

GridRow = tuple[str, float, float, float, str]
FloatArray = NDArray[np.float64]


class OutlineError(ValueError):
    """An outline that cannot describe the test's structure; the message names its line."""


@dataclass(frozen=True, slots=True)
class OutlineFace:
    """A face: its name, the line that starts it, its points (indices into `Outline.labels`)
    and the triangles given for it (empty when it is to be triangulated from its points)."""

    name: str
    line: int
    points: tuple[int, ...]
    triangles: tuple[tuple[int, int, int], ...]


@dataclass(frozen=True, slots=True)
class Outline:
    """The checked outline: the grid's points then those the file adds (label, x y z in m,
    direction), its faces (none: the file gives none) and its lines (index pairs)."""

    labels: tuple[str, ...]
    xyz: tuple[tuple[float, float, float], ...]
    directions: tuple[str, ...]
    faces: tuple[OutlineFace, ...]
    lines: tuple[tuple[int, int], ...]

    @property
    def rows(self) -> list[GridRow]:
        """(label, x, y, z, direction) of every point, the grid's first."""
        return [(lab, *p, d) for lab, p, d in zip(self.labels, self.xyz, self.directions,
                                                  strict=True)]  # fmt: skip


@dataclass
class _FaceDraft:
    name: str
    line: int
    points: list[int] = field(default_factory=list)
    triangles: list[tuple[int, int, int]] = field(default_factory=list)


@dataclass
class _Draft:
    labels: list[str]
    xyz: list[tuple[float, float, float]]
    dirs: list[str]
    faces: list[_FaceDraft] = field(default_factory=list)
    lines: list[tuple[int, int]] = field(default_factory=list)
    added: dict[str, int] = field(default_factory=dict)


def outline_of(meta: dict[str, Any]) -> str | None:
    """The outline text a test's metadata holds, None when it has none."""
    text = meta.get(META_KEY)
    return text if isinstance(text, str) and text.strip() else None


def parse_outline(text: str, grid: Sequence[GridRow], source: str = "outline") -> Outline:
    """The outline `text` checked against the test's `grid` rows (label, x, y, z m, direction).

    OutlineError "<source> line N: ..." for the first wrong record or face.
    """
    if len(text) > MAX_CHARS:
        raise OutlineError(f"{source}: {len(text)} characters; an outline holds {MAX_CHARS}")
    draft = _Draft([r[0] for r in grid], [(float(r[1]), float(r[2]), float(r[3])) for r in grid],
                   [r[4] for r in grid])  # fmt: skip
    for number, raw in enumerate(text.splitlines(), start=1):
        words = raw.split("#", 1)[0].split()
        if words:
            try:
                _record(draft, number, words)
            except OutlineError as exc:
                raise OutlineError(f"{source} line {number}: {exc}") from None
    if not draft.labels:
        raise OutlineError(f"{source}: no points (the test's grid is empty and none added)")
    xyz = np.array(draft.xyz, dtype=np.float64).reshape(-1, 3)
    for face in draft.faces:
        try:
            _check_face(face, xyz)
        except OutlineError as exc:
            raise OutlineError(f"{source} line {face.line}: {exc}") from None
    faces = tuple(OutlineFace(f.name, f.line, tuple(dict.fromkeys(f.points)), tuple(f.triangles))
                  for f in draft.faces)  # fmt: skip
    return Outline(tuple(draft.labels), tuple(draft.xyz), tuple(draft.dirs), faces,
                   tuple(draft.lines))  # fmt: skip


def _record(draft: _Draft, number: int, words: list[str]) -> None:
    """Apply one record to the draft; OutlineError (without the line) when it is wrong."""
    kind, args = words[0].lower(), words[1:]
    if kind == "point":
        _point(draft, args)
    elif kind == "face":
        if len(args) != 1:
            raise OutlineError("write: face NAME (one word)")
        if any(f.name == args[0] for f in draft.faces):
            raise OutlineError(f"face {args[0]!r} is already defined")
        draft.faces.append(_FaceDraft(args[0], number))
    elif kind in ("points", "tri", "quad"):
        if not draft.faces:
            raise OutlineError(f"{kind} before any face: start one with  face NAME")
        _surface(draft, draft.faces[-1], kind, args)
    elif kind == "line":
        at = [_known(draft, a) for a in args]
        if len(at) < 2:
            raise OutlineError("a line joins two or more points")
        draft.lines += [(a, b) for a, b in itertools.pairwise(at) if a != b]
    else:
        raise OutlineError(f"unknown record {words[0]!r}; use point, face, points, tri, quad, line")


def _point(draft: _Draft, args: list[str]) -> None:
    if len(args) not in (4, 5):
        raise OutlineError("write: point LABEL X Y Z [DIRECTION], coordinates in m")
    label = args[0]
    if label in draft.added:
        raise OutlineError(f"point {label!r} already added on line {draft.added[label]}")
    try:
        x, y, z = (float(v) for v in args[1:4])
    except ValueError:
        raise OutlineError(f"point {label!r}: coordinates {args[1:4]} are not numbers") from None
    if not all(np.isfinite((x, y, z))):
        raise OutlineError(f"point {label!r}: coordinates must be finite")
    direction = args[4] if len(args) == 5 else "+z"
    if direction not in DIRECTIONS:
        raise OutlineError(f"direction {direction!r} is not one of {' '.join(DIRECTIONS)}")
    if label in draft.labels:  # the file moves a grid point
        i = draft.labels.index(label)
        draft.xyz[i], draft.dirs[i] = (x, y, z), direction
    else:
        draft.labels.append(label)
        draft.xyz.append((x, y, z))
        draft.dirs.append(direction)
    draft.added[label] = len(draft.added) + 1


def _known(draft: _Draft, label: str) -> int:
    if label not in draft.labels:
        raise OutlineError(f"unknown point {label!r} (not in the test's grid nor added)")
    return draft.labels.index(label)


def _surface(draft: _Draft, face: _FaceDraft, kind: str, args: list[str]) -> None:
    at = [_known(draft, a) for a in args]
    if kind == "points":
        face.points += at
        return
    need = 3 if kind == "tri" else 4
    if len(at) != need:
        raise OutlineError(f"{kind} takes {need} points, got {len(at)}")
    if len(set(at)) != need:
        raise OutlineError(f"degenerate {kind}: a point is repeated ({' '.join(args)})")
    pts = np.array([draft.xyz[i] for i in at])
    halves = [(0, 1, 2)] if need == 3 else [(0, 1, 2), (0, 2, 3)]
    for a, b, c in halves:
        if np.linalg.norm(np.cross(pts[b] - pts[a], pts[c] - pts[a])) <= 1e-12:
            raise OutlineError(f"degenerate {kind}: {' '.join(args)} has no area")
        face.triangles.append((at[a], at[b], at[c]))
    face.points += at


def _check_face(face: _FaceDraft, xyz: FloatArray) -> None:
    """A face has points; one given only as points spans a plane (three or more points,
    not on one line, none repeated, all within PLANAR_TOLERANCE of their plane)."""
    if not face.points:
        raise OutlineError(f"face {face.name!r} has no points")
    if face.triangles:
        return
    members = np.unique(np.array(face.points))
    local = in_plane(face.name, xyz[members])
    scale = float(np.ptp(local, axis=0).max())
    if len(np.unique(np.round(local / scale, 9), axis=0)) < len(members):
        raise OutlineError(f"face {face.name!r} has two points at one place")


def in_plane(name: str, pts: FloatArray) -> FloatArray:
    """The coordinates (N, 2), m, of face `name`'s points `pts` (N, 3) in its own plane
    (`plane_of`); OutlineError when they are fewer than three, lie on one line, or do not
    lie in one plane within PLANAR_TOLERANCE of the face's size."""
    if len(pts) < 3:
        raise OutlineError(f"face {name!r} has {len(pts)} points; a face needs 3 or more")
    centre, frame, off = plane_of(pts)
    local: FloatArray = (pts - centre) @ frame[:2].T
    extent = np.ptp(local, axis=0)
    if extent.min() <= 1e-9 * max(float(extent.max()), 1e-12):
        raise OutlineError(f"face {name!r} is degenerate: its points lie on one line")
    if off > PLANAR_TOLERANCE:
        raise OutlineError(
            f"face {name!r} is not planar (a point lies {off:.1%} of its size off its plane); "
            "give its triangles or quads"
        )
    return local


def plane_of(xyz: FloatArray) -> tuple[FloatArray, FloatArray, float]:
    """(centroid (3,), frame (3, 3) whose rows are e1, e2, normal, out-of-plane share).

    The least-squares plane through the points (singular value decomposition of the centred
    coordinates); the share is the largest distance from it over the points' largest
    in-plane extent. e1 follows the global x axis where the plane allows (else y), so a
    face in the xy plane keeps its x and y.
    """
    centre = xyz.mean(axis=0)
    _, _, vt = np.linalg.svd(xyz - centre)
    normal = vt[2] / np.linalg.norm(vt[2])
    e1 = np.eye(3)[0] - normal * normal[0]
    if np.linalg.norm(e1) < 0.5:
        e1 = np.eye(3)[1] - normal * normal[1]
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(normal, e1)
    local = (xyz - centre) @ np.stack([e1, e2]).T
    extent = float(np.ptp(local, axis=0).max()) if len(xyz) else 0.0
    off = float(np.abs((xyz - centre) @ normal).max()) if len(xyz) else 0.0
    return centre, np.stack([e1, e2, normal]), off / extent if extent > 0 else np.inf
