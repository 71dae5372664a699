"""Rows ↔ records: the columns of point sets and hits, and the code that turns a record
into the values of a row and a row back into a record (JSON for lists and meta, BLOBs for
arrays; the columns and shape checks come from `schema.pointset`).
"""

from __future__ import annotations

import dataclasses
import json
import math
import sqlite3
from collections.abc import Iterable, Iterator, Sequence
from typing import Any

import numpy as np

from taprig.schema.pointset import (
    ARRAYS,
    HIT_DATA,
    HIT_SCALARS,
    HIT_SCALE,
    SCALARS,
    check_hit_record,
    check_shapes,
    in_dtype,
)
from taprig.schema.records import WirePointSetSummary

from ..errors import StoreError
from ..records import Finding, GridPoint, PointSet, RovingMode, StoredHit
from .blobs import decode_array, encode_array
from .entries import TestPlan

_HIT_FIELDS = ", ".join((*HIT_SCALARS, "findings"))


def _to_json(value: Any, what: str) -> str:
    try:
        return json.dumps(value, allow_nan=False, sort_keys=True)
    except (TypeError, ValueError) as exc:
        raise StoreError(f"{what} is not plain JSON: {exc}") from exc


def _check_shapes(ps: PointSet) -> None:
    """StoreError when the arrays of `ps` do not agree (`schema.pointset.check_shapes`)."""
    shapes = {a.name: np.shape(getattr(ps, a.name)) for a in ARRAYS}
    problem = check_shapes(len(ps.response_labels), len(ps.response_points), shapes)
    if problem is not None:
        raise StoreError(f"point set {ps.point!r}: {problem[0]}: {problem[1]}")


# Named columns, so that a later migration may add columns to these tables. A point set's
# scalars keep their names (its test is test_id), each array has the column of its ArraySpec.
_PS_COLUMNS = (
    "test_id",
    *(name for name in SCALARS if name != "test"),
    "meta",
    *(a.column for a in ARRAYS),
)
_HIT_COLUMNS = (
    "point_set_id", "ordinal", *HIT_SCALARS, "findings", HIT_DATA.column, HIT_SCALE.column
)  # fmt: skip
_SUMMARY_COLUMNS = ", ".join(
    "t.name AS test" if f.name == "test" else f"p.{f.name}"
    for f in dataclasses.fields(WirePointSetSummary)
)


def _insert_sql(table: str, columns: Sequence[str]) -> str:
    marks = ", ".join("?" * len(columns))
    return f"INSERT INTO {table} ({', '.join(columns)}) VALUES ({marks})"


def _point_set_row(test_id: int, ps: PointSet) -> tuple[Any, ...]:
    """The values of `_PS_COLUMNS` for `ps`."""
    values = {name: getattr(ps, name) for name in SCALARS}
    values["test_id"] = test_id
    values["n_averages"] = int(ps.n_averages)
    values["roving_mode"] = RovingMode(ps.roving_mode).value
    values["response_labels"] = _to_json(list(ps.response_labels), "response labels")
    values["response_points"] = _to_json(list(ps.response_points), "response points")
    values["meta"] = _to_json(ps.meta, f"meta of point set {ps.point!r}")
    for a in ARRAYS:
        values[a.column] = encode_array(
            getattr(ps, a.name), a.dtype, a.ndim, f"point set {ps.point!r}: {a.name}"
        )
    return tuple(values[column] for column in _PS_COLUMNS)


def _hit_rows(point_set_id: int, hits: Iterable[StoredHit]) -> Iterator[tuple[Any, ...]]:
    """The values of `_HIT_COLUMNS` for each hit."""
    # A generator: each hit is encoded as it is inserted, so a bad hit fails mid-transaction.
    for i, h in enumerate(hits):
        data, scale = _record_blobs(h, f"hit {i}")
        findings = _to_json([[f.code, f.message] for f in h.findings], f"hit {i} findings")
        values = {name: getattr(h, name) for name in HIT_SCALARS}
        values.update(
            point_set_id=point_set_id,
            ordinal=i,
            trigger_index=int(h.trigger_index),
            accepted=int(bool(h.accepted)),
            peak_force_n=float(h.peak_force_n),
            pulse_width_s=float(h.pulse_width_s),
            findings=findings,
            data=data,
            scale=scale,
        )
        yield tuple(values[column] for column in _HIT_COLUMNS)


def _record_blobs(h: StoredHit, what: str) -> tuple[bytes | None, bytes | None]:
    """The BLOBs of a hit's record (in its own dtype: codes or float32) and scale; StoreError
    when they do not fit together (`schema.pointset.check_hit_record`)."""
    if h.data is None:
        return None, None
    data = np.asarray(h.data)
    scale = None if h.scale is None else np.asarray(h.scale)
    problem = check_hit_record(data, scale)
    if problem is not None:
        raise StoreError(f"{what}: {problem[0]}: {problem[1]}")
    d, s = HIT_DATA, HIT_SCALE
    return (encode_array(data, data.dtype, d.ndim, f"{what} {d.name}"),
            encode_array(scale, s.dtype, s.ndim, f"{what} {s.name}"))  # fmt: skip


def _test_plan(conn: sqlite3.Connection, row: sqlite3.Row) -> TestPlan:
    grid = tuple(
        GridPoint(*p)
        for p in conn.execute(
            "SELECT label, x, y, z, direction FROM points WHERE test_id = ? ORDER BY ordinal",
            (row["id"],),
        )
    )
    return TestPlan(
        row["name"],
        grid,
        RovingMode(row["roving_mode"]),
        row["reference"],
        row["averages"],
        json.loads(row["meta"]),
        row["created_utc"],
        row["seq"],
    )


def _point_set(row: sqlite3.Row, hits: Sequence[sqlite3.Row]) -> PointSet:
    """The `PointSet` of a point_sets row (with its test's name as ``test``) and its hits."""
    values = {name: row[name] for name in SCALARS}
    values["roving_mode"] = RovingMode(row["roving_mode"])
    values["response_labels"] = tuple(json.loads(row["response_labels"]))
    values["response_points"] = tuple(json.loads(row["response_points"]))
    # Rows of schema 1 hold float64 spectra: read in today's dtypes (schema.pointset).
    arrays: dict[str, Any] = {
        a.name: in_dtype(decode_array(row[a.column]), a.dtype) for a in ARRAYS
    }
    stored = tuple(_stored_hit(h) for h in hits)
    return PointSet(**values, **arrays, hits=stored, meta=json.loads(row["meta"]))


def _stored_hit(h: sqlite3.Row) -> StoredHit:
    """The `StoredHit` of a hits row; SQLite's NULL for a NaN measure reads back as NaN, and
    a NULL scale beside a record (a row written before store version 3: float32 SI values)
    as 1.0."""
    values = {name: h[name] for name in HIT_SCALARS}
    values["accepted"] = bool(h["accepted"])
    for name in ("peak_force_n", "pulse_width_s"):
        values[name] = math.nan if h[name] is None else h[name]
    findings = tuple(Finding(c, m) for c, m in json.loads(h["findings"]))
    data = scale = None
    if h[HIT_DATA.column] is not None:
        data = decode_array(h[HIT_DATA.column])
        blob = h[HIT_SCALE.column]
        scale = np.ones(data.shape[0]) if blob is None else decode_array(blob)
        scale.flags.writeable = False
    return StoredHit(**values, findings=findings, data=data, scale=scale)
