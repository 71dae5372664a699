"""daemon/grid.py: grid CSV text → GridPoint list, with errors naming the line and the field."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from taprig.daemon.errors import GridError
from taprig.daemon.grid import grid_warnings, import_grid_csv
from taprig.daemon.records import GridPoint
from taprig.daemon.store import Store

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


def test_a_grid_in_millimetres_gets_a_warning() -> None:
    """A 600 × 400 mm panel written in millimetres reads as 600 m across."""
    mm = import_grid_csv("label,x,y,z\nA1,0,0,0\nE6,600,400,0\n")
    (warning,) = grid_warnings(mm)
    assert "spans 600 m across" in warning and "did you mean millimetres?" in warning
    assert "0.6 m" in warning
    metres = import_grid_csv("label,x,y,z\nA1,0,0,0\nE6,0.6,0.4,0\n")
    assert grid_warnings(metres) == []


def test_taprigd_run_warns_about_a_grid_in_millimetres(tmp_path: Path) -> None:
    grid = tmp_path / "grid.csv"
    grid.write_text("label,x,y,z\nA1,0,0,0\nB3,300,100,0\n", encoding="utf-8")
    done = subprocess.run(
        [sys.executable, "-m", "taprig.daemon", "run", "--test", "mm", "--grid", str(grid),
         "--duration", "0.3", "--set", "device.url=simulated",
         "--set", f"store.data_dir={tmp_path / 'data'}", "--set", "store.min_free_mb=1",
         "--set", "service.bind=127.0.0.1", "--set", "service.port=0",
         "--set", "service.advertise=false", "--sensor-at", "acc1=A1",
         "--sensor-at", "acc2=B3"],
        capture_output=True, text=True, timeout=120)  # fmt: skip
    assert done.returncode == 0, done.stderr
    assert "the grid spans 300 m across" in done.stderr and "millimetres" in done.stderr
    with Store(tmp_path / "data") as store:
        assert "millimetres" in store.get_test("mm").meta["grid_warnings"][0]
