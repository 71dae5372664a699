"""Where each response sensor sits: a grid point or off-grid coordinates, and its direction.

A roving-hammer test measures H(struck point, sensor place); without the sensor's place
the data cannot say which row is the driving point, so a test never guesses it. The place
is written as text in three places (a `[[channels]]` table, `taprigd run --sensor-at`, the
create-test request) and parsed here, once:

* where: a grid point's label (``"B3"``), or coordinates ``"x,y,z"`` in the grid's unit,
  metres (``"0.45,0.10,0"``);
* direction: ``"+x"`` ... ``"-z"``, or a vector ``"a,b,c"`` (normalised to unit length).

`place_sensors` turns the texts of every response channel into `SensorPlace`s against the
test's grid; `to_meta` is the form stored with the test (and so sent to workstations).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from .grid import grid_warnings
from .records import ChannelSpec, GridPoint

AXES = {"+x": (1.0, 0.0, 0.0), "-x": (-1.0, 0.0, 0.0), "+y": (0.0, 1.0, 0.0),
        "-y": (0.0, -1.0, 0.0), "+z": (0.0, 0.0, 1.0), "-z": (0.0, 0.0, -1.0)}  # fmt: skip
WHERE_HELP = 'a grid point\'s label ("B3") or coordinates "x,y,z" in metres ("0.45,0.10,0")'
DIRECTION_HELP = '"+x", "-x", "+y", "-y", "+z", "-z", or a vector "a,b,c"'

Vector = tuple[float, float, float]


@dataclass(frozen=True, slots=True)
class SensorPlace:
    """One response sensor's place. point: the grid label it sits on, None when off the
    grid; xyz: its coordinates, m; direction: as written; unit: that direction, unit length."""

    point: str | None
    xyz: Vector
    direction: str
    unit: Vector

    @property
    def name(self) -> str:
        """How a point set names the place: the grid label, or "x,y,z" off the grid."""
        return self.point if self.point is not None else ",".join(f"{c:g}" for c in self.xyz)

    def to_dict(self) -> dict[str, object]:
        return {"point": self.point, "xyz": list(self.xyz), "direction": self.direction,
                "unit": list(self.unit)}  # fmt: skip


def _numbers(text: str) -> Vector | None:
    parts = [p.strip() for p in text.split(",")]
    if len(parts) != 3:
        return None
    try:
        x, y, z = (float(p) for p in parts)
    except ValueError:
        return None
    return (x, y, z) if all(math.isfinite(v) for v in (x, y, z)) else None


def check_where(text: str) -> str | None:
    """The problem with a place's text, seen alone (no grid); None when it can be a place."""
    text = text.strip()
    if not text:
        return f"empty; must be {WHERE_HELP}"
    if "," in text and _numbers(text) is None:
        return f"{text!r} is neither a label nor three numbers x,y,z; must be {WHERE_HELP}"
    return None


def direction_vector(text: str) -> Vector:
    """The unit vector of a direction's text; ValueError naming what is allowed."""
    text = text.strip()
    if text in AXES:
        return AXES[text]
    v = _numbers(text)
    norm = math.sqrt(sum(c * c for c in v)) if v is not None else 0.0
    if v is None or norm == 0.0:
        raise ValueError(f"direction {text!r}: must be {DIRECTION_HELP} (not all zero)")
    x, y, z = (c / norm for c in v)
    return (x, y, z)


def place(where: str, direction: str, grid: Sequence[GridPoint]) -> SensorPlace:
    """One sensor's place on `grid`; ValueError when `where` is neither a label of the grid
    nor coordinates, or the direction is not one."""
    where = where.strip()
    unit = direction_vector(direction)
    by_label = {p.label: p for p in grid}
    if where in by_label:
        p = by_label[where]
        return SensorPlace(where, (p.x, p.y, p.z), direction.strip(), unit)
    xyz = _numbers(where) if "," in where else None
    if xyz is None:
        raise ValueError(f"{where!r} is not a point of the grid ({_some(grid)}) nor "
                         "coordinates x,y,z in metres")  # fmt: skip
    return SensorPlace(None, xyz, direction.strip(), unit)


def _some(grid: Sequence[GridPoint]) -> str:
    labels = [p.label for p in grid]
    return ", ".join(labels[:4]) + (f", ... {labels[-1]}" if len(labels) > 4 else "")


def place_sensors(
    responses: Sequence[str], given: Mapping[str, tuple[str, str]], grid: Sequence[GridPoint]
) -> tuple[dict[str, SensorPlace], list[str]]:
    """Each response channel's place from `given` (label -> (where, direction) texts).

    Returns the places found and the labels with none. ValueError names the channel whose
    text is wrong, or a label in `given` that is not a response channel.
    """
    unknown = sorted(set(given) - set(responses))
    if unknown:
        raise ValueError(f"{', '.join(unknown)}: not response channels (those are "
                         f"{', '.join(responses)})")  # fmt: skip
    places: dict[str, SensorPlace] = {}
    for label in responses:
        if label in given:
            where, direction = given[label]
            try:
                places[label] = place(where, direction, grid)
            except ValueError as exc:
                raise ValueError(f"sensor {label}: {exc}") from None
    return places, [r for r in responses if r not in places]


def to_meta(places: Mapping[str, SensorPlace]) -> dict[str, dict[str, object]]:
    """The places as stored with a test (JSON): label -> point, xyz (m), direction, unit."""
    return {label: p.to_dict() for label, p in places.items()}


def split_flag(text: str) -> tuple[str, str, str]:
    """``LABEL=WHERE[/DIRECTION]`` (the --sensor-at flag) -> (label, where, direction);
    the direction defaults to "+z". ValueError when the form is wrong."""
    label, sep, rest = text.partition("=")
    where, _, direction = rest.partition("/")
    if not sep or not label.strip() or not where.strip():
        raise ValueError(f"--sensor-at {text!r}: must be written LABEL=WHERE[/DIRECTION], e.g. "
                         "acc1=B3/+z or acc2=0.45,0.10,0/-z")  # fmt: skip
    return label.strip(), where.strip(), direction.strip() or "+z"


def test_places(
    channels: Sequence[ChannelSpec],
    given: Mapping[str, str | tuple[str, str]],
    grid: Sequence[GridPoint],
    reference: str | None,
) -> tuple[dict[str, SensorPlace], list[str], str]:
    """The places of a roving-hammer test's response `channels`: (places, missing, reference).

    `given` (label -> where, or (where, direction)) wins over a channel's configured
    location; a bare where takes the channel's configured direction. `reference`, when
    given, places the first response channel if nothing else does (and must agree with its
    place if something does). The test's reference is the first response channel's place
    name ("" while unknown). ValueError names what is wrong.
    """
    texts: dict[str, tuple[str, str]] = {
        c.label: (c.location, c.direction) for c in channels if c.location
    }
    for label, value in given.items():
        configured = next((c.direction for c in channels if c.label == label), "+z")
        texts[label] = (value, configured) if isinstance(value, str) else value
    first = channels[0]
    if reference is not None and first.label not in texts:
        texts[first.label] = (reference, first.direction)
    places, missing = place_sensors([c.label for c in channels], texts, grid)
    ref = places[first.label].name if first.label in places else ""
    if reference is not None and ref and reference.strip() != ref:
        raise ValueError(f"reference {reference!r}: in a roving-hammer test the reference "
                         f"is where the first sensor sits; {first.label} sits at {ref}")
    return places, missing, ref


def test_meta(
    hammer: bool,
    grid: Sequence[GridPoint],
    reference: str | None,
    channels: Sequence[ChannelSpec],
    given: Mapping[str, str | tuple[str, str]],
) -> tuple[str, dict[str, Any]]:
    """A new test's reference and the metadata stored with it: its grid's warnings and, for a
    roving hammer (`hammer`), its sensors' places (`test_places`) with the labels still
    unknown. Roving sensor: the reference is the struck grid point (default the first).
    ValueError names what is wrong."""
    warnings = grid_warnings(list(grid))
    if not hammer:
        ref = reference if reference is not None else grid[0].label
        if ref not in {p.label for p in grid}:
            raise ValueError(f"reference {ref!r} is not a point of the grid")
        return ref, {"sensor_points": {}, "grid_warnings": warnings}
    places, missing, ref = test_places(channels, given, grid, reference)
    return ref, {"sensor_points": {label: p.name for label, p in places.items()},
                 "sensors": to_meta(places), "sensors_missing": missing,
                 "grid_warnings": warnings}  # fmt: skip


def missing_message(test: str, missing: Sequence[str]) -> str:
    """What to say when a roving-hammer test lacks sensor places (the CLI's refusal)."""
    first = missing[0]
    return (
        f"test {test!r}: roving hammer, but where sensor{'s' if len(missing) > 1 else ''} "
        f"{', '.join(missing)} sit{'' if len(missing) > 1 else 's'} is not known, and taprig "
        f"never guesses it. Give it with --sensor-at {first}=B3/+z (a grid label, or "
        f"x,y,z in metres, then the direction), or location = \"...\" in the channel's "
        "[[channels]] table"
    )
