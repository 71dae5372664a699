"""The records a client receives (daemon ↔ client), and their making from the daemon's records.

Both `taprig.daemon` and `taprig.client` import this module, and it imports neither: it is
the contract. `WirePointSet` and `WireHit` take their fields from `schema.pointset`, where
the point set is declared once; `WirePointSetSummary`, `WireTest` and `WireChange` are the
listing, the test and the change-feed entry. Their encoding is `schema.objects` (to and from
plain objects, strict) and `schema.codec` (msgpack).

Records with arrays are ``eq=False`` dataclasses: ``==`` on them is identity, because
element-wise comparison of arrays has no single truth value.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Final, Protocol

from .pointset import HIT_SCALARS, HitFields, PointSetFields, field_values

SCHEMA_VERSION: Final = 3
"""Version of the objects below; raised on any change to their fields or meaning.

1: the first. 2: spectra as float32 / complex64 (were float64 / complex128); every other
field as in 1 (`schema.pointset`, "Precision"). 3: a hit's record as the device's integer
codes (int16 / int32, or float32 SI values from a device without codes) with its ``scale``,
SI units per code of each channel (were float32 SI values, no scale).
"""
READ_VERSIONS: Final = frozenset({1, 2, SCHEMA_VERSION})
"""Versions this side reads: bodies stored by older rigs, mirrors and archives stay readable."""

ROVING_MODES: Final = frozenset({"hammer", "sensor"})
"""Values of `roving_mode`: roving hammer (sensors fixed) or roving sensor (hammer fixed)."""
CHANGE_KINDS: Final = frozenset({"test", "point_set"})
"""Values of `WireChange.kind`."""

GridRow = tuple[str, float, float, float, str]
"""A grid point on the wire: (label, x m, y m, z m, direction such as "+z")."""


class SchemaError(ValueError):
    """Input that does not follow this schema (or is not msgpack at all).

    field: the dotted path of the offending field (``"hits[0].data.dtype"``), or None when the
    whole message is at fault. The message names it as well.
    """

    def __init__(self, message: str, field: str | None = None) -> None:
        super().__init__(f"{field}: {message}" if field else message)
        self.field = field


@dataclass(frozen=True, slots=True, eq=False)
class WireHit(HitFields[tuple[str, str]]):
    """A hit as sent (`HitFields`); each finding a (code, sentence) pair."""


@dataclass(frozen=True, slots=True, eq=False, kw_only=True)
class WirePointSet(PointSetFields[WireHit]):
    """A completed point set as sent (`PointSetFields`), with the store's id of it (the one in
    its URL)."""

    id: int


@dataclass(frozen=True, slots=True)
class WirePointSetSummary:
    """A point set in a listing, without arrays or hits (fields as in `WirePointSet`)."""

    id: int
    test: str
    point: str
    version: int
    seq: int
    completed_utc: str
    n_averages: int


@dataclass(frozen=True, slots=True)
class WireTest:
    """A test: its grid in measuring order, roving mode, reference point, averages per point.

    grid: (label, x, y, z, direction) per point, coordinates in metres, direction one of
    "+x" "-x" "+y" "-y" "+z" "-z". reference: roving sensor, the struck grid label;
    roving hammer, where the first sensor sits (a grid label, "x,y,z" in m, or "" unknown).
    created_utc: ISO 8601 UTC.
    seq: its number in the change feed. meta: plain JSON values.
    """

    name: str
    roving_mode: str
    reference: str
    averages: int
    created_utc: str
    seq: int
    grid: tuple[GridRow, ...]
    meta: dict[str, Any] = dataclasses.field(default_factory=dict)


@dataclass(frozen=True, slots=True)
class WireChange:
    """One entry of the change feed: a new test (point_set_id None) or a new point set."""

    seq: int
    kind: str  # one of CHANGE_KINDS
    test: str
    point_set_id: int | None


# ---------------------------------------------------------------- from the daemon's records
#
# The daemon's point set and hit records extend the same bases as the wire's; its findings,
# tests and changes fit these structural types without this module importing the daemon.


class FindingLike(Protocol):
    @property
    def code(self) -> str: ...
    @property
    def message(self) -> str: ...


class GridPointLike(Protocol):
    @property
    def label(self) -> str: ...
    @property
    def x(self) -> float: ...
    @property
    def y(self) -> float: ...
    @property
    def z(self) -> float: ...
    @property
    def direction(self) -> str: ...


class TestPlanLike(Protocol):
    """Anything with a test's fields (the daemon's `TestPlan`)."""

    @property
    def name(self) -> str: ...
    @property
    def grid(self) -> Sequence[GridPointLike]: ...
    @property
    def roving_mode(self) -> str: ...
    @property
    def reference(self) -> str: ...
    @property
    def averages(self) -> int: ...
    @property
    def meta(self) -> Mapping[str, Any]: ...
    @property
    def created_utc(self) -> str: ...
    @property
    def seq(self) -> int: ...


class ChangeLike(Protocol):
    @property
    def seq(self) -> int: ...
    @property
    def kind(self) -> str: ...
    @property
    def test(self) -> str: ...
    @property
    def point_set_id(self) -> int | None: ...


def hit_from_record(hit: HitFields[FindingLike]) -> WireHit:
    """The `WireHit` of a stored hit (its record and scale are not copied)."""
    pairs = tuple((f.code, f.message) for f in hit.findings)
    scalars = {n: getattr(hit, n) for n in HIT_SCALARS}
    return WireHit(**scalars, findings=pairs, data=hit.data, scale=hit.scale)


def point_set_from_record(
    point_set_id: int, ps: PointSetFields[HitFields[FindingLike]]
) -> WirePointSet:
    """The `WirePointSet` of a stored point set and its store id (arrays are not copied)."""
    hits = tuple(hit_from_record(h) for h in ps.hits)
    return WirePointSet(id=point_set_id, **field_values(ps), hits=hits)


def test_from_record(plan: TestPlanLike) -> WireTest:
    """The `WireTest` of a stored test."""
    return WireTest(
        name=plan.name,
        roving_mode=str(plan.roving_mode),
        reference=plan.reference,
        averages=plan.averages,
        created_utc=plan.created_utc,
        seq=plan.seq,
        grid=tuple((p.label, p.x, p.y, p.z, p.direction) for p in plan.grid),
        meta=dict(plan.meta),
    )


test_from_record.__test__ = False  # type: ignore[attr-defined]  # not a pytest test


def change_from_record(change: ChangeLike) -> WireChange:
    """The `WireChange` of a change-feed entry."""
    return WireChange(change.seq, change.kind, change.test, change.point_set_id)
