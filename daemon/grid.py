"""Grid CSV: the points of a test from text with header ``label,x,y,z[,direction]``, and
the outline (the structure's faces and lines, taprig.schema.outline) that may come with it.

Used by `taprigd run --grid FILE [--outline FILE]` (an outline named like the grid, with
the suffix ``.outline``, is taken from beside it) and by the service's ``grid_csv`` and
``outline`` body fields. Coordinates in metres; the direction one of +x -x +y -y +z -z
("+z" when left out).
"""

from __future__ import annotations

import csv
import io
import math
import re
from pathlib import Path

from taprig.schema.outline import META_KEY, OutlineError, parse_outline

from .errors import GridError
from .records import GridPoint

_DIRECTION = re.compile(r"[+-][xyz]")
# A grid wider than this, in metres, is more likely written in millimetres: a tap test with
# an instrumented hammer covers a part or a panel, a machine or a car body at most (common
# practice; a bridge deck tested by hammer would pass this by a lot, hence only a warning).
PLAUSIBLE_EXTENT_M = 20.0
MAX_POINTS = 4096  # points in one test's grid, however the grid arrives


def import_grid_csv(text: str, max_points: int | None = None) -> list[GridPoint]:
    """Grid points from CSV text with header `label,x,y,z[,direction]` (metres, "+z" default).

    Blank lines are skipped. Raises GridError naming the line and the field, or when there
    are more than `max_points` points (counted before any is parsed).
    """
    rows = [(n, r) for n, r in enumerate(csv.reader(io.StringIO(text)), 1) if any(r)]
    if max_points is not None and len(rows) - 1 > max_points:
        raise GridError(f"grid CSV has {len(rows) - 1} points; at most {max_points} are allowed")
    if not rows:
        raise GridError("grid CSV is empty")
    header = [h.strip().lower() for h in rows[0][1]]
    if header not in (["label", "x", "y", "z"], ["label", "x", "y", "z", "direction"]):
        raise GridError(
            f"grid CSV line {rows[0][0]}: header must be label,x,y,z[,direction], "
            f"got {','.join(rows[0][1])}"
        )
    points: list[GridPoint] = []
    seen: dict[str, int] = {}
    for line, row in rows[1:]:
        point = _grid_row(line, header, row)
        if point.label in seen:
            raise GridError(
                f"grid CSV line {line}: label {point.label!r} already on line {seen[point.label]}"
            )
        seen[point.label] = line
        points.append(point)
    if not points:
        raise GridError("grid CSV has a header but no points")
    return points


def grid_warnings(points: list[GridPoint]) -> list[str]:
    """Warnings about a grid that is valid but probably not what was meant (units)."""
    if not points:
        return []
    spans = [max(c) - min(c) for c in zip(*((p.x, p.y, p.z) for p in points), strict=True)]
    extent = max(spans)
    if extent <= PLAUSIBLE_EXTENT_M:
        return []
    return [f"the grid spans {extent:g} m across, implausible for a tap test: coordinates are "
            f"in metres; did you mean millimetres? ({extent:g} mm would be {extent / 1000:g} m; "
            "divide the coordinates by 1000)"]  # fmt: skip


def _grid_row(line: int, header: list[str], row: list[str]) -> GridPoint:
    if len(row) != len(header):
        raise GridError(f"grid CSV line {line}: {len(row)} fields, expected {len(header)}")
    cells = dict(zip(header, (c.strip() for c in row), strict=True))
    if not cells["label"]:
        raise GridError(f"grid CSV line {line}, field 'label': empty")
    x, y, z = (_grid_number(line, axis, cells[axis]) for axis in ("x", "y", "z"))
    direction = cells.get("direction") or "+z"
    if not _DIRECTION.fullmatch(direction):
        raise GridError(
            f"grid CSV line {line}, field 'direction': {direction!r} is not one "
            "of +x -x +y -y +z -z"
        )
    return GridPoint(cells["label"], x, y, z, direction)


def _grid_number(line: int, field: str, cell: str) -> float:
    try:
        value = float(cell)
    except ValueError:
        raise GridError(
            f"grid CSV line {line}, field {field!r}: {cell!r} is not a number"
        ) from None
    if not math.isfinite(value):
        raise GridError(f"grid CSV line {line}, field {field!r}: {cell!r} is not finite")
    return value


OUTLINE_SUFFIX = ".outline"  # <grid CSV's stem>.outline beside the grid is its outline


def outline_beside(grid_csv: Path) -> Path | None:
    """The outline file named like `grid_csv` beside it, None when there is none."""
    path = grid_csv.with_suffix(OUTLINE_SUFFIX)
    return path if path.is_file() else None


def check_outline(text: str, grid: list[GridPoint], source: str = "outline") -> str:
    """`text` when it is an outline of `grid`; GridError "<source> line N: ..." otherwise."""
    rows = [(p.label, p.x, p.y, p.z, p.direction) for p in grid]
    try:
        parse_outline(text, rows, source)
    except OutlineError as exc:
        raise GridError(str(exc)) from None
    return text


def read_outline(path: Path, grid: list[GridPoint]) -> str:
    """The text of outline file `path`, checked against `grid` (GridError naming its line)."""
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise GridError(f"outline {path}: cannot read it ({exc})") from None
    return check_outline(text, grid, str(path))


def test_meta(sensor_points: dict[str, str] | None, outline: str | None) -> dict[str, object]:
    """A new test's metadata: the point each response sensor sits on and, when one came with
    the grid, the outline's text (checked by `check_outline`), so it travels with the test."""
    meta: dict[str, object] = {"sensor_points": sensor_points or {}}
    if outline is not None:
        meta[META_KEY] = outline
    return meta
