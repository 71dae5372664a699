"""What the store hands back besides point sets (a stored test, a change, its stats) and the
shape of the wire-body encoder it is given."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, ClassVar

from ..records import GridPoint, PointSet, RovingMode

BodyEncoder = Callable[[int, "PointSet"], tuple[int, str, bytes]]
"""(point set id, the point set as stored, hits without data) -> (schema, digest, body)."""


@dataclass(frozen=True, slots=True)
class TestPlan:
    """A stored test: its grid in measuring order, roving mode, reference point, averages."""

    __test__: ClassVar[bool] = False  # not a pytest test class despite the name

    name: str
    grid: tuple[GridPoint, ...]
    roving_mode: RovingMode
    reference: str
    averages: int
    meta: dict[str, Any]
    created_utc: str
    seq: int


@dataclass(frozen=True, slots=True)
class Change:
    """One entry of the change feed: a new test (point_set_id None) or a new point set."""

    seq: int
    kind: str  # "test" | "point_set"
    test: str
    point_set_id: int | None


@dataclass(frozen=True, slots=True)
class StoreStats:
    """Size and contents of the store; file sizes in bytes (the WAL counted apart)."""

    path: str
    db_bytes: int
    wal_bytes: int
    tests: int
    point_sets: int
    hits: int
    last_seq: int
    schema_version: int
