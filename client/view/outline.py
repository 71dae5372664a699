"""The outline file turned into drawable geometry: the test's faces and lines.

The format and its checks live in taprig.schema.outline (the rig checks an outline at its
door with the same code and keeps its text with the test); here a checked outline becomes a
`Geometry`: faces given as ``tri``/``quad`` records keep exactly those triangles, faces
given only as ``points`` are triangulated (geometry.triangulate), and a file with no face at
all gets one face over every point, as the grid alone would. Errors name the file's line.
`geometry_of(data)` is the geometry a test carries: its outline over its grid, else its grid.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from taprig.schema.outline import Outline, OutlineError, OutlineFace, outline_of
from taprig.schema.outline import parse_outline as check_outline

from .geometry import Face, Geometry, GeometryError, face_normal, from_grid, triangulate

if TYPE_CHECKING:
    from ..dataset import TestData

__all__ = ["SUFFIX", "geometry_of", "parse_outline", "read_outline"]

SUFFIX = ".outline"  # the file's usual name: <grid CSV's stem>.outline beside it
GridRow = tuple[str, float, float, float, str]


def read_outline(path: Path, grid: Sequence[GridRow]) -> Geometry:
    """The geometry of outline file `path` over `grid`; GeometryError naming file and line."""
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise GeometryError(f"outline {path}: cannot read it ({exc})") from None
    return parse_outline(text, grid, source=str(path))


def parse_outline(text: str, grid: Sequence[GridRow], source: str = "outline") -> Geometry:
    """The geometry the outline `text` describes over the test's `grid` rows."""
    try:
        outline = check_outline(text, grid, source)
    except OutlineError as exc:
        raise GeometryError(str(exc)) from None
    return build(outline, source)


def build(outline: Outline, source: str = "outline") -> Geometry:
    """The drawable geometry of a checked outline (faces triangulated where not given)."""
    base = from_grid(outline.rows)
    faces = base.faces
    if outline.faces:
        faces = tuple(_face(base, f, source) for f in outline.faces)
    lines = np.array(outline.lines, dtype=np.int64).reshape(-1, 2)
    return Geometry(base.labels, base.xyz, base.directions, faces, lines)


def geometry_of(data: TestData) -> Geometry:
    """The geometry a test carries: the outline kept with it (its metadata) over its grid,
    else the grid alone (one face, triangulated when planar)."""
    text = outline_of(data.test_meta)
    if text is None:
        return from_grid(data.grid)
    return parse_outline(text, data.grid, source=f"the outline of test {data.test!r}")


def _face(base: Geometry, draft: OutlineFace, source: str) -> Face:
    """The face of a checked outline; errors carry the face record's line."""
    if draft.triangles:
        tri = np.array(draft.triangles, dtype=np.int64).reshape(-1, 3)
        given = True
    else:
        try:
            tri = triangulate(draft.name, base.xyz, np.unique(np.array(draft.points)))
        except GeometryError as exc:
            raise GeometryError(f"{source} line {draft.line}: {exc}") from None
        given = False
    return Face(draft.name, tri, face_normal(base.xyz, base.directions, tri), given)
