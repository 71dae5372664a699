"""Grid CSV: the points of a test from text with header ``label,x,y,z[,direction]``.

Used by `taprigd run --grid FILE` and by the service's ``grid_csv`` body field. Coordinates
in metres; the direction one of +x -x +y -y +z -z ("+z" when left out).
"""

from __future__ import annotations

import csv
import io
import math
import re

from .errors import GridError
from .records import GridPoint

_DIRECTION = re.compile(r"[+-][xyz]")
# A grid wider than this, in metres, is more likely written in millimetres: a tap test with
# an instrumented hammer covers a part or a panel, a machine or a car body at most (common
# practice; a bridge deck tested by hammer would pass this by a lot, hence only a warning).
PLAUSIBLE_EXTENT_M = 20.0


def import_grid_csv(text: str) -> list[GridPoint]:
    """Grid points from CSV text with header `label,x,y,z[,direction]` (metres, "+z" default).

    Blank lines are skipped. Raises GridError naming the line and the field.
    """
    rows = [(n, r) for n, r in enumerate(csv.reader(io.StringIO(text)), 1) if any(r)]
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
