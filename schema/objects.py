"""Records ↔ plain objects: the wire form of point sets, tests, listings and changes.

`*_to_obj` turns a record of `schema.records` into an *object* (dicts, lists, str, int, float,
bool, None, bytes) that msgpack packs as it is (`schema.codec`), and for everything without
arrays also JSON; `*_from_obj` turns one back, strictly. Every top-level object carries
``"schema": SCHEMA_VERSION``. A missing or unknown field, a value of the wrong type, an array
of the wrong dtype or shape, or arrays whose shapes disagree raise `SchemaError` naming the
field (``hits[2].data.shape``). Adding a field is a new `SCHEMA_VERSION`.

The point set's fields, dtypes and dimensions come from `schema.pointset`; this module adds
only what each scalar may hold (`_RULES`).

Arrays travel as ``{"dtype": "<f8" | "<f4" | "<c8" | "<i2" | "<i4", "shape": [d0, d1, ...],
"data": <bin>}``: the raw little-endian C-order bytes of the array, so a round trip is bit
for bit (NaN payloads included). Each spectrum has one fixed dtype; the encoder casts to it
when the cast stays within the kind (float → float, real → complex is refused for real
fields) and the decoder accepts exactly that dtype. A hit's record keeps its own dtype, one
of ``"<i2"``, ``"<i4"`` (device codes) or ``"<f4"`` (SI values), with its ``scale``
(``"<f8"``, one per channel) beside it; any other dtype or a scale that does not fit is
refused. Decoded arrays are read-only views of the received bytes.
"""

from __future__ import annotations

import dataclasses
import math
import re
from collections.abc import Callable
from typing import Any, Final

import numpy as np

from .checks import (
    at,
    boolean,
    choice,
    exact,
    fail,
    integer,
    meta_map,
    number,
    sequence,
    text,
    texts,
    top_fields,
)
from .pointset import (
    ARRAY_DTYPES,
    ARRAYS,
    HIT_DATA,
    HIT_DATA_SINCE,
    HIT_SCALARS,
    HIT_SCALE,
    SCALARS,
    SCHEMA_DTYPES,
    check_hit_record,
    check_shapes,
    in_dtype,
)
from .records import (
    CHANGE_KINDS,
    ROVING_MODES,
    SCHEMA_VERSION,
    GridRow,
    WireChange,
    WireHit,
    WirePointSet,
    WirePointSetSummary,
    WireTest,
)

# ---------------------------------------------------------------- arrays


def array_to_obj(a: Any, dtype: np.dtype[Any], ndim: int, where: str) -> dict[str, Any]:
    """``{"dtype", "shape", "data"}`` of `a` cast to `dtype` (one of `ARRAY_DTYPES`).

    SchemaError if `a` is not `ndim`-dimensional or its dtype does not cast to `dtype` within
    its kind (object and complex-to-real casts are refused).
    """
    if dtype.str not in ARRAY_DTYPES:
        raise ValueError(f"{dtype} is not a wire dtype")
    try:
        arr = np.asarray(a)
    except (ValueError, TypeError) as exc:  # ragged nested lists and the like
        fail(where, f"not an array: {exc}")
    if arr.dtype.hasobject or not np.can_cast(arr.dtype, dtype, casting="same_kind"):
        fail(at(where, "dtype"), f"expected {dtype.str}, got {arr.dtype.str}")
    if arr.ndim != ndim:
        fail(at(where, "shape"), f"expected {ndim} dimensions, got shape {arr.shape}")
    data = np.ascontiguousarray(arr, dtype=dtype).tobytes()
    return {"dtype": dtype.str, "shape": [int(n) for n in arr.shape], "data": data}


def array_from_obj(
    obj: Any, dtype: np.dtype[Any] | tuple[np.dtype[Any], ...], ndim: int, where: str
) -> np.ndarray:
    """The read-only array of an `array_to_obj` object; it must have `dtype` (or one of the
    tuple `dtype`) and `ndim`."""
    fields = exact(obj, where, ("dtype", "shape", "data"))
    code = text(fields["dtype"], at(where, "dtype"))
    if code not in ARRAY_DTYPES:
        fail(at(where, "dtype"), f"{code!r} is not one of {', '.join(ARRAY_DTYPES)}")
    allowed = {d.str: d for d in (dtype if isinstance(dtype, tuple) else (dtype,))}
    if code not in allowed:
        fail(at(where, "dtype"), f"expected {' or '.join(allowed)}, got {code}")
    dtype = allowed[code]
    shape_at = at(where, "shape")
    shape = tuple(
        integer(n, f"{shape_at}[{i}]", 0) for i, n in enumerate(sequence(fields["shape"], shape_at))
    )
    if len(shape) != ndim:
        fail(shape_at, f"expected {ndim} dimensions, got {list(shape)}")
    data = fields["data"]
    if not isinstance(data, bytes):
        fail(at(where, "data"), f"expected binary data, got {type(data).__name__}")
    if math.prod(shape) * dtype.itemsize != len(data):
        fail(
            at(where, "data"),
            f"{len(data)} bytes do not hold shape {list(shape)} of {dtype.str} "
            f"({math.prod(shape) * dtype.itemsize} bytes)",
        )
    try:
        arr = np.frombuffer(data, dtype=dtype).reshape(shape)
    except ValueError as exc:  # an empty array with an absurd dimension
        fail(shape_at, str(exc))
    arr.flags.writeable = False
    return arr


# ---------------------------------------------------------------- point sets

Rule = Callable[[Any, str], Any]

_RULES: Final[dict[str, Rule]] = {
    "id": lambda v, where: integer(v, where, 0),
    "test": lambda v, where: text(v, where, nonempty=True),
    "point": lambda v, where: text(v, where, nonempty=True),
    "version": lambda v, where: integer(v, where, 1),
    "seq": lambda v, where: integer(v, where, 0),
    "completed_utc": text,
    "roving_mode": lambda v, where: choice(v, where, ROVING_MODES),
    "drive_point": text,
    "response_labels": texts,
    "response_points": texts,
    "n_averages": lambda v, where: integer(v, where, 0),
    # a hit's plain fields
    "trigger_index": integer,
    "utc": text,
    "accepted": boolean,
    "peak_force_n": number,
    "pulse_width_s": number,
}
"""What each plain field of a point set, its listing and its hits may hold."""

_PS_SCALARS: Final = ("id", *SCALARS)
_PS_FIELDS: Final = (*_PS_SCALARS, *(a.name for a in ARRAYS), "hits", "meta")
_HIT_FIELDS: Final = (*HIT_SCALARS, "findings", HIT_DATA.name, HIT_SCALE.name)
_OLD_HIT_FIELDS: Final = (*HIT_SCALARS, "findings", HIT_DATA.name)
"""A hit's fields before `HIT_DATA_SINCE` (float32 SI records, no scale)."""
_SUMMARY_FIELDS: Final = tuple(f.name for f in dataclasses.fields(WirePointSetSummary))


def _checked(get: Callable[[str], Any], names: tuple[str, ...], where: str) -> dict[str, Any]:
    """The fields `names` (by `get`) checked by their `_RULES`, in that order."""
    return {name: _RULES[name](get(name), at(where, name)) for name in names}


def _shapes_must_agree(scalars: dict[str, Any], shapes: dict[str, tuple[int, ...]]) -> None:
    """SchemaError naming the array whose shape disagrees (`schema.pointset.check_shapes`)."""
    n_labels, n_points = len(scalars["response_labels"]), len(scalars["response_points"])
    problem = check_shapes(n_labels, n_points, shapes)
    if problem is not None:
        fail(*problem)


def _findings(value: Any, where: str) -> tuple[tuple[str, str], ...]:
    findings = []
    for i, pair in enumerate(sequence(value, where)):
        here = f"{where}[{i}]"
        items = sequence(pair, here)
        if len(items) != 2:
            fail(here, f"expected [code, text], got {len(items)} items")
        findings.append((text(items[0], f"{here}[0]"), text(items[1], f"{here}[1]")))
    return tuple(findings)


def _hit_record_must_fit(data: Any, scale: Any, where: str) -> None:
    """SchemaError naming the field when a hit's record and scale do not fit together
    (`schema.pointset.check_hit_record`)."""
    problem = check_hit_record(data, scale)
    if problem is not None:
        fail(at(where, problem[0]), problem[1])


def _hit_to_obj(h: WireHit, where: str, with_data: bool) -> dict[str, Any]:
    out = _checked(lambda k: getattr(h, k), HIT_SCALARS, where)
    out["findings"] = [list(pair) for pair in _findings(h.findings, at(where, "findings"))]
    data = scale = None
    if with_data and h.data is not None:
        arr = np.asarray(h.data)
        per = None if h.scale is None else np.asarray(h.scale)
        _hit_record_must_fit(arr, per, where)
        data = array_to_obj(arr, arr.dtype, HIT_DATA.ndim, at(where, HIT_DATA.name))
        scale = array_to_obj(per, HIT_SCALE.dtype, HIT_SCALE.ndim, at(where, HIT_SCALE.name))
    out[HIT_DATA.name] = data
    out[HIT_SCALE.name] = scale
    return out


def _hit_from_obj(obj: Any, where: str, schema: int) -> WireHit:
    """A hit of a body of `schema`: before `HIT_DATA_SINCE` its record is float32 SI values
    without a scale, read with a scale of 1.0."""
    d, s = HIT_DATA, HIT_SCALE
    old = schema < HIT_DATA_SINCE
    f = exact(obj, where, _OLD_HIT_FIELDS if old else _HIT_FIELDS)
    data = scale = None
    if f[d.name] is not None:
        data = array_from_obj(f[d.name], d.dtype if old else d.allowed, d.ndim, at(where, d.name))
    if old and data is not None:
        scale = np.ones(data.shape[0], dtype=s.dtype)
        scale.flags.writeable = False
    elif not old and f[s.name] is not None:
        scale = array_from_obj(f[s.name], s.dtype, s.ndim, at(where, s.name))
    _hit_record_must_fit(data, scale, where)
    return WireHit(
        **_checked(f.__getitem__, HIT_SCALARS, where),
        findings=_findings(f["findings"], at(where, "findings")),
        data=data,
        scale=scale,
    )


def point_set_to_obj(ps: WirePointSet, with_hits: bool) -> dict[str, Any]:
    """The msgpack-ready object of `ps` (arrays as ``{"dtype", "shape", "data"}``).

    with_hits: include each hit's raw record; without, hits are listed with ``"data": None``
    (their times, measures and findings are small; the records are most of the bytes).
    SchemaError if `ps` breaks the schema (types, dtypes, shapes that disagree).
    """
    scalars = _checked(lambda k: getattr(ps, k), _PS_SCALARS, "")
    encoded = {a.name: array_to_obj(getattr(ps, a.name), a.dtype, a.ndim, a.name) for a in ARRAYS}
    _shapes_must_agree(scalars, {name: tuple(a["shape"]) for name, a in encoded.items()})
    hits = sequence(ps.hits, "hits")
    out: dict[str, Any] = {"schema": SCHEMA_VERSION}
    out.update(scalars)
    out["response_labels"] = list(scalars["response_labels"])
    out["response_points"] = list(scalars["response_points"])
    out.update(encoded)
    out["hits"] = [_hit_to_obj(h, f"hits[{i}]", with_hits) for i, h in enumerate(hits)]
    out["meta"] = meta_map(ps.meta, "meta")
    return out


def point_set_from_obj(obj: Any) -> WirePointSet:
    """The `WirePointSet` of a `point_set_to_obj` object (as `unpack` gives it back).

    Reads every schema of `READ_VERSIONS`: arrays an older schema stored in other dtypes
    (`SCHEMA_DTYPES`) come back in today's, rounded as a cast rounds (to nearest); hits of
    schemas before `HIT_DATA_SINCE` keep their float32 SI records, with a scale of 1.0.
    Strict: SchemaError naming the field for a missing or extra field, a wrong type, a dtype
    other than the field's, a shape that does not match its bytes or the other arrays.
    """
    f = top_fields(obj, "", _PS_FIELDS)
    scalars = _checked(f.__getitem__, _PS_SCALARS, "")
    dtypes = SCHEMA_DTYPES[f["schema"]]
    arrays: dict[str, Any] = {
        a.name: in_dtype(array_from_obj(f[a.name], dtypes[a.name], a.ndim, a.name), a.dtype)
        for a in ARRAYS
    }
    _shapes_must_agree(scalars, {name: a.shape for name, a in arrays.items()})
    listed = enumerate(sequence(f["hits"], "hits"))
    hits = tuple(_hit_from_obj(h, f"hits[{i}]", f["schema"]) for i, h in listed)
    return WirePointSet(**scalars, **arrays, hits=hits, meta=meta_map(f["meta"], "meta"))


def point_set_summary_json(summary: WirePointSetSummary | WirePointSet) -> dict[str, Any]:
    """The JSON-ready object of a point set in a listing (no arrays, no hits); also
    msgpack-ready. Takes a listing's row or a whole `WirePointSet`."""
    fields = _checked(lambda k: getattr(summary, k), _SUMMARY_FIELDS, "")
    return {"schema": SCHEMA_VERSION, **fields}


def point_set_summary_from_json(obj: Any) -> WirePointSetSummary:
    """The `WirePointSetSummary` of a `point_set_summary_json` object (strict)."""
    f = top_fields(obj, "", _SUMMARY_FIELDS)
    return WirePointSetSummary(**_checked(f.__getitem__, _SUMMARY_FIELDS, ""))


# ---------------------------------------------------------------- tests and changes

_TEST_FIELDS: Final = tuple(f.name for f in dataclasses.fields(WireTest))
_DIRECTION: Final = re.compile(r"[+-][xyz]")
_CHANGE_FIELDS: Final = tuple(f.name for f in dataclasses.fields(WireChange))


def _grid(rows: Any, where: str) -> list[GridRow]:
    grid: list[GridRow] = []
    seen: set[str] = set()
    for i, row in enumerate(sequence(rows, where)):
        here = f"{where}[{i}]"
        items = sequence(row, here)
        if len(items) != 5:
            fail(here, f"expected [label, x, y, z, direction], got {len(items)} items")
        label = text(items[0], f"{here}[0]", nonempty=True)
        if label in seen:
            fail(f"{here}[0]", f"label {label!r} appears twice")
        seen.add(label)
        x, y, z = (number(items[k], f"{here}[{k}]", finite=True) for k in (1, 2, 3))
        direction = text(items[4], f"{here}[4]")
        if not _DIRECTION.fullmatch(direction):
            fail(f"{here}[4]", f"{direction!r} is not one of +x -x +y -y +z -z")
        grid.append((label, x, y, z, direction))
    if not grid:
        fail(where, "a test needs at least one grid point")
    return grid


def _test_fields(get: Callable[[str], Any]) -> dict[str, Any]:
    grid = _grid(get("grid"), "grid")
    reference = text(get("reference"), "reference")
    mode = choice(get("roving_mode"), "roving_mode", ROVING_MODES)
    # Roving hammer: where the first sensor sits, which may be off the grid ("x,y,z", m) or
    # not yet known (""); roving sensor: the struck point, always a label of the grid.
    if mode != "hammer" and reference not in {row[0] for row in grid}:
        fail("reference", f"{reference!r} is not a label of the grid")
    return {
        "name": text(get("name"), "name", nonempty=True),
        "roving_mode": mode,
        "reference": reference,
        "averages": integer(get("averages"), "averages", 1),
        "created_utc": text(get("created_utc"), "created_utc"),
        "seq": integer(get("seq"), "seq", 0),
        "grid": grid,
        "meta": meta_map(get("meta"), "meta"),
    }


def test_to_obj(test: WireTest) -> dict[str, Any]:
    """The object of `test`; it has no arrays, so it is both JSON- and msgpack-ready."""
    out: dict[str, Any] = {"schema": SCHEMA_VERSION}
    out.update(_test_fields(lambda k: getattr(test, k)))
    out["grid"] = [list(row) for row in out["grid"]]
    return out


def test_from_obj(obj: Any) -> WireTest:
    """The `WireTest` of a `test_to_obj` object, from JSON or msgpack (strict)."""
    f = _test_fields(top_fields(obj, "", _TEST_FIELDS).__getitem__)
    f["grid"] = tuple(f["grid"])
    return WireTest(**f)


def _change_fields(get: Callable[[str], Any]) -> dict[str, Any]:
    kind = choice(get("kind"), "kind", CHANGE_KINDS)
    ps_id = get("point_set_id")
    if kind == "test" and ps_id is not None:
        fail("point_set_id", "must be null for a test change")
    if kind == "point_set":
        ps_id = integer(ps_id, "point_set_id", 0)
    return {
        "seq": integer(get("seq"), "seq", 0),
        "kind": kind,
        "test": text(get("test"), "test", nonempty=True),
        "point_set_id": ps_id,
    }


def change_to_obj(change: WireChange) -> dict[str, Any]:
    """The object of a change-feed entry; both JSON- and msgpack-ready."""
    return {"schema": SCHEMA_VERSION, **_change_fields(lambda k: getattr(change, k))}


def change_from_obj(obj: Any) -> WireChange:
    """The `WireChange` of a `change_to_obj` object, from JSON or msgpack (strict)."""
    return WireChange(**_change_fields(top_fields(obj, "", _CHANGE_FIELDS).__getitem__))


test_to_obj.__test__ = False  # type: ignore[attr-defined]  # not pytest tests
test_from_obj.__test__ = False  # type: ignore[attr-defined]
