"""Where the sensors sit: parsed once, never guessed, refused by `taprigd run` when unknown.

The driving point of a roving-hammer test is the row struck where a sensor sits (common
practice: the driving-point FRF is the one with response and excitation at the same point
and direction; Ewins, Modal Testing, 2nd ed., 2000, §3.1, from memory).
"""

from __future__ import annotations

import math
import subprocess
import sys
from pathlib import Path

import pytest

from taprig.daemon import placement
from taprig.daemon.config import load_config
from taprig.daemon.records import GridPoint, RovingMode
from taprig.daemon.store import Store

GRID = [GridPoint("A1", 0.0, 0.0, 0.0), GridPoint("B3", 0.2, 0.1, 0.0)]


def test_a_place_is_a_grid_label_or_coordinates_with_a_direction() -> None:
    on = placement.place("B3", "-z", GRID)
    assert on.point == "B3" and on.xyz == (0.2, 0.1, 0.0) and on.unit == (0.0, 0.0, -1.0)
    assert on.name == "B3"
    off = placement.place(" 0.45, 0.10,0 ", "0,3,4", GRID)
    assert off.point is None and off.xyz == (0.45, 0.1, 0.0) and off.name == "0.45,0.1,0"
    assert off.unit == pytest.approx((0.0, 0.6, 0.8))  # (0, 3, 4) / 5
    with pytest.raises(ValueError, match="'Q7' is not a point of the grid"):
        placement.place("Q7", "+z", GRID)
    with pytest.raises(ValueError, match="direction '0,0,0'"):
        placement.place("B3", "0,0,0", GRID)
    with pytest.raises(ValueError, match="direction 'up'"):
        placement.place("B3", "up", GRID)
    assert placement.check_where("1,2") is not None and placement.check_where("B3") is None


def test_the_flag_form() -> None:
    assert placement.split_flag("acc1=B3/+z") == ("acc1", "B3", "+z")
    assert placement.split_flag("acc2=0.4,0.1,0") == ("acc2", "0.4,0.1,0", "+z")
    with pytest.raises(ValueError, match="LABEL=WHERE"):
        placement.split_flag("acc1")


def test_places_come_from_the_config_then_the_test_and_are_never_guessed(tmp_path: Path) -> None:
    cfg = tmp_path / "rig.toml"
    cfg.write_text(_channels_toml(side_location="0.3,0.2,0"), encoding="utf-8")
    channels = load_config(cfg, environ={}).response_channels
    places, missing, ref = placement.test_places(channels, {}, GRID, None)
    assert missing == ["acc1"] and set(places) == {"side"} and ref == ""
    places, missing, ref = placement.test_places(channels, {"acc1": ("B3", "+y")}, GRID, None)
    assert missing == [] and ref == "B3" and places["acc1"].unit == (0.0, 1.0, 0.0)
    assert places["side"].point is None and places["side"].direction == "-x"
    # --reference in hammer mode is where the first sensor sits: it must agree
    with pytest.raises(ValueError, match="acc1 sits at B3"):
        placement.test_places(channels, {"acc1": "B3"}, GRID, "A1")
    with pytest.raises(ValueError, match="nope: not response channels"):
        placement.test_places(channels, {"nope": "B3"}, GRID, None)


def _channels_toml(side_location: str = "") -> str:
    side = f'location = "{side_location}"\n' if side_location else ""
    return (
        '[device]\nurl = "simulated"\n'
        '[[channels]]\nindex = 0\nrole = "force"\nlabel = "hammer"\nsensitivity = 2.25\n'
        'unit = "mV/N"\n'
        '[[channels]]\nindex = 1\nrole = "response"\nlabel = "acc1"\nsensitivity = 1.02\n'
        'unit = "mV/(m/s^2)"\n'
        '[[channels]]\nindex = 2\nrole = "response"\nlabel = "side"\nsensitivity = 1.02\n'
        f'unit = "mV/(m/s^2)"\ndirection = "-x"\n{side}'
    )


def _run(tmp_path: Path, *args: str) -> subprocess.CompletedProcess[str]:
    cfg = tmp_path / "rig.toml"
    cfg.write_text(_channels_toml(), encoding="utf-8")
    grid = tmp_path / "grid.csv"
    grid.write_text("label,x,y,z\nA1,0,0,0\nB3,0.2,0.1,0\n", encoding="utf-8")
    argv = [sys.executable, "-m", "taprig.daemon", "run", "-c", str(cfg), "--test", "t1",
            "--grid", str(grid), "--duration", "0.5",
            "--set", f"store.data_dir={tmp_path / 'data'}", "--set", "store.min_free_mb=1",
            "--set", "service.bind=127.0.0.1", "--set", "service.port=0",
            "--set", "service.advertise=false", *args]  # fmt: skip
    return subprocess.run(argv, capture_output=True, text=True, timeout=120)


def test_taprigd_run_refuses_a_roving_hammer_test_without_sensor_places(tmp_path: Path) -> None:
    """A sensor the simulated piece does not carry ('side') has no place: refused, nothing
    stored, one clear line naming the flag to use."""
    done = _run(tmp_path)
    assert done.returncode == 4, done.stderr
    assert "Traceback" not in done.stderr
    assert "where sensor side sits is not known" in done.stderr
    assert "--sensor-at side=" in done.stderr
    with Store(tmp_path / "data") as store:
        assert store.list_tests() == []


def test_taprigd_run_stores_the_places_it_is_given(tmp_path: Path) -> None:
    done = _run(tmp_path, "--sensor-at", "side=0.45,0.1,0/0,1,1")
    assert done.returncode == 0, done.stderr
    with Store(tmp_path / "data") as store:
        plan = store.get_test("t1")
    assert plan.roving_mode == RovingMode.HAMMER
    # acc1 sits where the simulated panel carries it: B3 (a point of this grid)
    assert plan.reference == "B3"
    sensors = plan.meta["sensors"]
    assert sensors["acc1"]["point"] == "B3" and sensors["side"]["point"] is None
    assert sensors["side"]["xyz"] == [0.45, 0.1, 0.0] and sensors["side"]["direction"] == "0,1,1"
    assert sensors["side"]["unit"] == pytest.approx([0.0, math.sqrt(0.5), math.sqrt(0.5)])
    assert plan.meta["sensors_missing"] == []
    assert plan.meta["sensor_points"] == {"acc1": "B3", "side": "0.45,0.1,0"}
