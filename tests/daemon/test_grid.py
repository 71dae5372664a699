"""daemon/grid.py: grid CSV text → GridPoint list, with errors naming the line and the field."""

from __future__ import annotations

import pytest

from taprig.daemon.errors import GridError
from taprig.daemon.grid import import_grid_csv
from taprig.daemon.records import GridPoint

GOOD_CSV = """label,x,y,z,direction
P1, 0.0, 0.0, 0.0, +z

P2,0.25,0,0.0,-y
P3,0.5,1e-1,0,
"""


def test_grid_csv_good() -> None:
    """Coordinates parse as Python floats (metres); an empty direction means "+z"."""
    assert import_grid_csv(GOOD_CSV) == [
        GridPoint("P1", 0.0, 0.0, 0.0, "+z"),
        GridPoint("P2", 0.25, 0.0, 0.0, "-y"),
        GridPoint("P3", 0.5, 0.1, 0.0, "+z"),
    ]
    assert import_grid_csv("label,x,y,z\nA,1,2,3\n") == [GridPoint("A", 1.0, 2.0, 3.0)]


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("name,x,y,z\nP1,0,0,0\n", "line 1: header must be label,x,y,z"),
        ("label,x,y,z\nP1,0,0,0\nP2,0,abc,0\n", "line 3, field 'y': 'abc' is not a number"),
        ("label,x,y,z\nP1,0,0,nan\n", "line 2, field 'z': 'nan' is not finite"),
        ("label,x,y,z\nP1,0,0,0\n\nP1,1,0,0\n", "line 4: label 'P1' already on line 2"),
        ("label,x,y,z,direction\nP1,0,0,0,up\n", "line 2, field 'direction'"),
        ("label,x,y,z\nP1,0,0\n", "line 2: 3 fields, expected 4"),
        ("label,x,y,z\n", "no points"),
        ("", "empty"),
    ],
)
def test_grid_csv_errors_name_line_and_field(text: str, message: str) -> None:
    with pytest.raises(GridError, match=message):
        import_grid_csv(text)
