"""The outline file: a test's faces and lines in a small text format of our own.

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
triangulated (geometry.triangulate). A file with no face at all gets one face over every
point, as the grid alone would. Errors name the file's line: unknown point, unknown
record, a degenerate surface (a repeated point or no area), a face with no points, a face
that is not planar and has no surfaces given.
"""

from __future__ import annotations

import itertools
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .geometry import (
    Face,
    Geometry,
    GeometryError,
    direction_vector,
    face_normal,
    from_grid,
    triangulate,
)

__all__ = ["SUFFIX", "parse_outline", "read_outline"]

SUFFIX = ".outline"  # the file's usual name: <grid CSV's stem>.outline beside it
GridRow = tuple[str, float, float, float, str]


@dataclass
class _FaceDraft:
    name: str
    line: int
    points: list[int] = field(default_factory=list)
    triangles: list[tuple[int, int, int]] = field(default_factory=list)


@dataclass
class _Draft:
    labels: list[str]
    xyz: list[list[float]]
    dirs: list[str]
    faces: list[_FaceDraft] = field(default_factory=list)
    lines: list[tuple[int, int]] = field(default_factory=list)
    added: dict[str, int] = field(default_factory=dict)


def read_outline(path: Path, grid: Sequence[GridRow]) -> Geometry:
    """The geometry of outline file `path` over `grid`; GeometryError naming file and line."""
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise GeometryError(f"outline {path}: cannot read it ({exc})") from None
    return parse_outline(text, grid, source=str(path))


def parse_outline(text: str, grid: Sequence[GridRow], source: str = "outline") -> Geometry:
    """The geometry the outline `text` describes over the test's `grid` rows."""
    draft = _Draft([r[0] for r in grid], [list(r[1:4]) for r in grid], [r[4] for r in grid])
    for number, raw in enumerate(text.splitlines(), start=1):
        words = raw.split("#", 1)[0].split()
        if words:
            try:
                _record(draft, number, words)
            except GeometryError as exc:
                raise GeometryError(f"{source} line {number}: {exc}") from None
    if not draft.labels:
        raise GeometryError(f"{source}: no points (the test's grid is empty and none added)")
    rows = [(lab, *xyz, d) for lab, xyz, d in zip(draft.labels, draft.xyz, draft.dirs, strict=True)]
    base = from_grid(rows)  # type: ignore[arg-type]
    faces = base.faces
    if draft.faces:
        faces = tuple(_face(base, f, source) for f in draft.faces)
    lines = np.array(draft.lines, dtype=np.int64).reshape(-1, 2)
    return Geometry(base.labels, base.xyz, base.directions, faces, lines)


def _record(draft: _Draft, number: int, words: list[str]) -> None:
    """Apply one record to the draft; GeometryError (without the line) when it is wrong."""
    kind, args = words[0].lower(), words[1:]
    if kind == "point":
        _point(draft, args)
    elif kind == "face":
        if len(args) != 1:
            raise GeometryError("write: face NAME (one word)")
        if any(f.name == args[0] for f in draft.faces):
            raise GeometryError(f"face {args[0]!r} is already defined")
        draft.faces.append(_FaceDraft(args[0], number))
    elif kind in ("points", "tri", "quad"):
        if not draft.faces:
            raise GeometryError(f"{kind} before any face: start one with  face NAME")
        _surface(draft, draft.faces[-1], kind, args)
    elif kind == "line":
        at = [_known(draft, a) for a in args]
        if len(at) < 2:
            raise GeometryError("a line joins two or more points")
        draft.lines += [(a, b) for a, b in itertools.pairwise(at) if a != b]
    else:
        raise GeometryError(
            f"unknown record {words[0]!r}; use point, face, points, tri, quad, line"
        )


def _point(draft: _Draft, args: list[str]) -> None:
    if len(args) not in (4, 5):
        raise GeometryError("write: point LABEL X Y Z [DIRECTION], coordinates in m")
    label = args[0]
    if label in draft.added:
        raise GeometryError(f"point {label!r} already added on line {draft.added[label]}")
    try:
        xyz = [float(v) for v in args[1:4]]
    except ValueError:
        raise GeometryError(f"point {label!r}: coordinates {args[1:4]} are not numbers") from None
    if not all(np.isfinite(xyz)):
        raise GeometryError(f"point {label!r}: coordinates must be finite")
    direction = args[4] if len(args) == 5 else "+z"
    direction_vector(direction)  # checked here, so the error carries the line
    if label in draft.labels:  # the file moves a grid point
        i = draft.labels.index(label)
        draft.xyz[i], draft.dirs[i] = xyz, direction
    else:
        draft.labels.append(label)
        draft.xyz.append(xyz)
        draft.dirs.append(direction)
    draft.added[label] = len(draft.added) + 1


def _known(draft: _Draft, label: str) -> int:
    if label not in draft.labels:
        raise GeometryError(f"unknown point {label!r} (not in the test's grid nor added)")
    return draft.labels.index(label)


def _surface(draft: _Draft, face: _FaceDraft, kind: str, args: list[str]) -> None:
    at = [_known(draft, a) for a in args]
    if kind == "points":
        face.points += at
        return
    need = 3 if kind == "tri" else 4
    if len(at) != need:
        raise GeometryError(f"{kind} takes {need} points, got {len(at)}")
    if len(set(at)) != need:
        raise GeometryError(f"degenerate {kind}: a point is repeated ({' '.join(args)})")
    pts = np.array([draft.xyz[i] for i in at])
    halves = [(0, 1, 2)] if need == 3 else [(0, 1, 2), (0, 2, 3)]
    for a, b, c in halves:
        if np.linalg.norm(np.cross(pts[b] - pts[a], pts[c] - pts[a])) <= 1e-12:
            raise GeometryError(f"degenerate {kind}: {' '.join(args)} has no area")
        face.triangles.append((at[a], at[b], at[c]))


def _face(base: Geometry, draft: _FaceDraft, source: str) -> Face:
    """The face from its draft; errors carry the face record's line."""
    where = f"{source} line {draft.line}"
    if draft.triangles:
        tri = np.array(draft.triangles, dtype=np.int64)
        given = True
    elif draft.points:
        try:
            tri = triangulate(draft.name, base.xyz, np.unique(np.array(draft.points)))
        except GeometryError as exc:
            raise GeometryError(f"{where}: {exc}") from None
        given = False
    else:
        raise GeometryError(f"{where}: face {draft.name!r} has no points")
    return Face(draft.name, tri, face_normal(base.xyz, base.directions, tri), given)
