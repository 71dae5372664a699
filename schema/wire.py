"""The versioned wire schema of point sets, tests and the change feed (daemon ↔ client).

Both `taprig.daemon` (the HTTP service) and `taprig.client` import this module, and it imports
neither: it is the contract. It holds

- the plain records a client receives (`WirePointSet`, `WireHit`, `WireTest`, `WireChange`,
  `WirePointSetSummary`), frozen dataclasses of Python values and numpy arrays;
- their conversion to and from *objects* (dicts, lists, str, int, float, bool, None, bytes)
  that msgpack packs as they are, and for everything without arrays also JSON;
- `pack` / `unpack`, a msgpack codec with limits, for bodies of `MSGPACK` content type;
- `wants_msgpack` (content negotiation) and `digest` (checksums for verified transfers).

Every top-level object carries ``"schema": SCHEMA_VERSION``. Decoding is strict: a missing or
unknown field, a value of the wrong type, an array of the wrong dtype or shape, or arrays whose
shapes disagree raise `SchemaError` naming the field (``hits[2].data.shape``), so a reader
never works on half-understood data. Adding a field is a new `SCHEMA_VERSION`.

Arrays travel as ``{"dtype": "<f8" | "<f4" | "<c16", "shape": [d0, d1, ...], "data": <bin>}``:
the raw little-endian C-order bytes of the array, so a round trip is bit for bit (NaN payloads
included). Each array field has one fixed dtype (see `WirePointSet`); the encoder casts to it
when the cast stays within the kind (float → float, real → complex is refused for real
fields) and the decoder accepts exactly that dtype. Decoded arrays are read-only views of the
received bytes.

Records with arrays are ``eq=False`` dataclasses: ``==`` on them is identity, because
element-wise comparison of arrays has no single truth value.
"""

from __future__ import annotations

import base64
import dataclasses
import hashlib
import math
import operator
import re
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Final, NoReturn, Protocol

import msgpack
import numpy as np

SCHEMA_VERSION: Final = 1
"""Version of the objects below; raised on any change to their fields or meaning."""

MSGPACK: Final = "application/vnd.taprig.v1+msgpack"
"""Content type of msgpack bodies (point sets with arrays; also everything else)."""
JSON: Final = "application/json"
"""Content type of JSON bodies (listings, tests, changes: everything without arrays)."""

ROVING_MODES: Final = frozenset({"hammer", "sensor"})
"""Values of `roving_mode`: roving hammer (sensors fixed) or roving sensor (hammer fixed)."""
CHANGE_KINDS: Final = frozenset({"test", "point_set"})
"""Values of `WireChange.kind`."""

F4: Final = np.dtype("<f4")
F8: Final = np.dtype("<f8")
C16: Final = np.dtype("<c16")
ARRAY_DTYPES: Final[Mapping[str, np.dtype[Any]]] = {d.str: d for d in (F4, F8, C16)}
"""The only dtypes an array on the wire may have, by their numpy code."""

MAX_NESTING: Final = 32
"""Deepest nesting of lists and maps accepted in `meta`."""

_ARRAY_KEYS: Final = frozenset({"dtype", "shape", "data"})
_INT64 = range(-(2**63), 2**64)  # what msgpack can carry as an integer

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


def _fail(where: str, message: str) -> NoReturn:
    raise SchemaError(message, where or None)


# ---------------------------------------------------------------- records


@dataclass(frozen=True, slots=True, eq=False)
class WireHit:
    """One hit of a point set as sent.

    trigger_index: device sample index at which the force crossed the trigger level.
    utc: ISO 8601 UTC time of the hit. accepted: whether it went into the average.
    peak_force_n: peak hammer force, N (NaN if unknown). pulse_width_s: force pulse width, s
    (NaN if unknown). findings: (code, sentence) pairs from the checks, rejections and warnings.
    data: (channels, block) float32 record in SI units (N, m/s²), channel order of the rig's
    configuration; None when the point set was asked for without raw hits.
    """

    trigger_index: int
    utc: str
    accepted: bool
    peak_force_n: float
    pulse_width_s: float
    findings: tuple[tuple[str, str], ...]
    data: np.ndarray | None


@dataclass(frozen=True, slots=True, eq=False)
class WirePointSet:
    """A completed point set: what was measured at one grid point of one test.

    id: the store's id of the point set (the one in its URL). version: 1, 2, ... for repeated
    measurements of the same point. seq: its number in the change feed.
    roving_mode: one of `ROVING_MODES`; in "hammer" mode drive_point is the tapped point and
    response_points are the fixed sensors' points; in "sensor" mode drive_point is the fixed
    reference.  response_labels[i] names the sensor of row i of every (n_resp, n_freq) array.

    Arrays (n_resp = len(response_labels), n_freq = len(freq_hz)):

    ==========  ================  =======  =============================================
    field       shape             dtype    unit
    ==========  ================  =======  =============================================
    freq_hz     (n_freq,)         <f8      Hz
    h1, h2      (n_resp, n_freq)  <c16     (m/s²)/N (accelerance)
    coherence   (n_resp, n_freq)  <f8      1
    gff         (n_freq,)         <f8      N²/Hz, one-sided force auto spectrum
    gxx         (n_resp, n_freq)  <f8      (m/s²)²/Hz, one-sided response auto spectra
    gfx         (n_resp, n_freq)  <c16     (m/s²)·N/Hz, one-sided cross spectra
    ==========  ================  =======  =============================================

    meta: plain JSON values (str keys; no NaN).
    """

    id: int
    test: str
    point: str
    version: int
    seq: int
    completed_utc: str
    roving_mode: str
    drive_point: str
    response_labels: tuple[str, ...]
    response_points: tuple[str, ...]
    n_averages: int
    freq_hz: np.ndarray
    h1: np.ndarray
    h2: np.ndarray
    coherence: np.ndarray
    gff: np.ndarray
    gxx: np.ndarray
    gfx: np.ndarray
    hits: tuple[WireHit, ...]
    meta: dict[str, Any] = dataclasses.field(default_factory=dict)


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
# Structural types: the daemon's records fit them without this module importing the daemon.


class FindingLike(Protocol):
    @property
    def code(self) -> str: ...
    @property
    def message(self) -> str: ...


class HitLike(Protocol):
    @property
    def trigger_index(self) -> int: ...
    @property
    def utc(self) -> str: ...
    @property
    def accepted(self) -> bool: ...
    @property
    def peak_force_n(self) -> float: ...
    @property
    def pulse_width_s(self) -> float: ...
    @property
    def findings(self) -> Sequence[FindingLike]: ...
    @property
    def data(self) -> np.ndarray | None: ...


class PointSetLike(Protocol):
    """Anything with a point set's fields except `id` (the daemon's `PointSet`)."""

    @property
    def test(self) -> str: ...
    @property
    def point(self) -> str: ...
    @property
    def version(self) -> int: ...
    @property
    def seq(self) -> int: ...
    @property
    def completed_utc(self) -> str: ...
    @property
    def roving_mode(self) -> str: ...
    @property
    def drive_point(self) -> str: ...
    @property
    def response_labels(self) -> Sequence[str]: ...
    @property
    def response_points(self) -> Sequence[str]: ...
    @property
    def n_averages(self) -> int: ...
    @property
    def freq_hz(self) -> np.ndarray: ...
    @property
    def h1(self) -> np.ndarray: ...
    @property
    def h2(self) -> np.ndarray: ...
    @property
    def coherence(self) -> np.ndarray: ...
    @property
    def gff(self) -> np.ndarray: ...
    @property
    def gxx(self) -> np.ndarray: ...
    @property
    def gfx(self) -> np.ndarray: ...
    @property
    def hits(self) -> Sequence[HitLike]: ...
    @property
    def meta(self) -> Mapping[str, Any]: ...


class PointSetSummaryLike(Protocol):
    """Anything with a listing's fields (the daemon's `PointSetSummary`, a `WirePointSet`)."""

    @property
    def id(self) -> int: ...
    @property
    def test(self) -> str: ...
    @property
    def point(self) -> str: ...
    @property
    def version(self) -> int: ...
    @property
    def seq(self) -> int: ...
    @property
    def completed_utc(self) -> str: ...
    @property
    def n_averages(self) -> int: ...


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


def point_set_from_record(point_set_id: int, ps: PointSetLike) -> WirePointSet:
    """The `WirePointSet` of a stored point set and its store id (arrays are not copied)."""
    hits = tuple(
        WireHit(
            trigger_index=h.trigger_index,
            utc=h.utc,
            accepted=h.accepted,
            peak_force_n=h.peak_force_n,
            pulse_width_s=h.pulse_width_s,
            findings=tuple((f.code, f.message) for f in h.findings),
            data=h.data,
        )
        for h in ps.hits
    )
    return WirePointSet(
        id=point_set_id,
        test=ps.test,
        point=ps.point,
        version=ps.version,
        seq=ps.seq,
        completed_utc=ps.completed_utc,
        roving_mode=str(ps.roving_mode),
        drive_point=ps.drive_point,
        response_labels=tuple(ps.response_labels),
        response_points=tuple(ps.response_points),
        n_averages=ps.n_averages,
        freq_hz=ps.freq_hz,
        h1=ps.h1,
        h2=ps.h2,
        coherence=ps.coherence,
        gff=ps.gff,
        gxx=ps.gxx,
        gfx=ps.gfx,
        hits=hits,
        meta=dict(ps.meta),
    )


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


# ---------------------------------------------------------------- scalar checks


def _int(value: Any, where: str, minimum: int | None = None) -> int:
    # operator.index takes int and numpy integers but no float or str; bool is refused apart.
    if isinstance(value, bool):
        _fail(where, "expected an integer, got a bool")
    try:
        n = operator.index(value)
    except TypeError:
        _fail(where, f"expected an integer, got {type(value).__name__}")
    if n not in _INT64:
        _fail(where, f"integer {n} out of the 64-bit range")
    if minimum is not None and n < minimum:
        _fail(where, f"must be at least {minimum}, got {n}")
    return n


def _float(value: Any, where: str, finite: bool = False) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float | np.floating | np.integer):
        _fail(where, f"expected a number, got {type(value).__name__}")
    x = float(value)
    if finite and not math.isfinite(x):
        _fail(where, f"must be finite, got {x}")
    return x


def _bool(value: Any, where: str) -> bool:
    if not isinstance(value, bool | np.bool_):
        _fail(where, f"expected true or false, got {type(value).__name__}")
    return bool(value)


def _str(value: Any, where: str, nonempty: bool = False) -> str:
    if not isinstance(value, str):
        _fail(where, f"expected a string, got {type(value).__name__}")
    if nonempty and not value:
        _fail(where, "must not be empty")
    return str(value)  # a plain str also for a str subclass (an enum member)


def _choice(value: Any, where: str, allowed: frozenset[str]) -> str:
    s = _str(value, where)
    if s not in allowed:
        _fail(where, f"{s!r} is not one of {', '.join(sorted(allowed))}")
    return s


def _seq(value: Any, where: str) -> Sequence[Any]:
    if not isinstance(value, list | tuple):
        _fail(where, f"expected an array, got {type(value).__name__}")
    return value


def _strs(value: Any, where: str) -> tuple[str, ...]:
    return tuple(_str(v, f"{where}[{i}]") for i, v in enumerate(_seq(value, where)))


def _plain(value: Any, where: str, depth: int = 0) -> Any:
    """A copy of `value` if it is plain JSON (tuples become lists); SchemaError otherwise."""
    if depth > MAX_NESTING:
        _fail(where, f"nested deeper than {MAX_NESTING}")
    if value is None or isinstance(value, bool | str):
        return value
    if isinstance(value, int):
        return _int(value, where)
    if isinstance(value, float):
        return _float(value, where, finite=True)
    if isinstance(value, list | tuple):
        return [_plain(v, f"{where}[{i}]", depth + 1) for i, v in enumerate(value)]
    if isinstance(value, dict):
        out: dict[str, Any] = {}
        for k, v in value.items():
            if not isinstance(k, str):
                _fail(where, f"key {k!r} is not a string")
            out[k] = _plain(v, f"{where}.{k}", depth + 1)
        return out
    _fail(where, f"{type(value).__name__} is not a plain JSON value")


def _meta(value: Any, where: str) -> dict[str, Any]:
    if not isinstance(value, dict):
        _fail(where, f"expected a map, got {type(value).__name__}")
    meta: dict[str, Any] = _plain(value, where)
    return meta


def _fields(obj: Any, where: str, names: tuple[str, ...]) -> dict[str, Any]:
    """`obj` as a dict with exactly the keys `names` plus ``schema``, checked."""
    return _exact(obj, where, (*names, "schema"), top=True)


def _exact(obj: Any, where: str, names: tuple[str, ...], top: bool = False) -> dict[str, Any]:
    if not isinstance(obj, dict):
        _fail(where, f"expected a map, got {type(obj).__name__}")
    prefix = f"{where}." if where else ""
    for key in obj:
        if key not in names:
            _fail(f"{prefix}{key}", "unexpected field")
    for key in names:
        if key not in obj:
            _fail(f"{prefix}{key}", "missing field")
    if top and _int(obj["schema"], f"{prefix}schema") != SCHEMA_VERSION:
        _fail(
            f"{prefix}schema",
            f"schema version {obj['schema']} is not {SCHEMA_VERSION}, the one this side "
            "speaks; update the older of client and rig",
        )
    return obj


def _at(where: str, key: str) -> str:
    return f"{where}.{key}" if where else key


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
        _fail(where, f"not an array: {exc}")
    if arr.dtype.hasobject or not np.can_cast(arr.dtype, dtype, casting="same_kind"):
        _fail(_at(where, "dtype"), f"expected {dtype.str}, got {arr.dtype.str}")
    if arr.ndim != ndim:
        _fail(_at(where, "shape"), f"expected {ndim} dimensions, got shape {arr.shape}")
    data = np.ascontiguousarray(arr, dtype=dtype).tobytes()
    return {"dtype": dtype.str, "shape": [int(n) for n in arr.shape], "data": data}


def array_from_obj(obj: Any, dtype: np.dtype[Any], ndim: int, where: str) -> np.ndarray:
    """The read-only array of an `array_to_obj` object; it must have `dtype` and `ndim`."""
    fields = _exact(obj, where, ("dtype", "shape", "data"))
    code = _str(fields["dtype"], _at(where, "dtype"))
    if code not in ARRAY_DTYPES:
        _fail(_at(where, "dtype"), f"{code!r} is not one of {', '.join(ARRAY_DTYPES)}")
    if code != dtype.str:
        _fail(_at(where, "dtype"), f"expected {dtype.str}, got {code}")
    shape_at = _at(where, "shape")
    shape = tuple(
        _int(n, f"{shape_at}[{i}]", 0) for i, n in enumerate(_seq(fields["shape"], shape_at))
    )
    if len(shape) != ndim:
        _fail(shape_at, f"expected {ndim} dimensions, got {list(shape)}")
    data = fields["data"]
    if not isinstance(data, bytes):
        _fail(_at(where, "data"), f"expected binary data, got {type(data).__name__}")
    if math.prod(shape) * dtype.itemsize != len(data):
        _fail(
            _at(where, "data"),
            f"{len(data)} bytes do not hold shape {list(shape)} of {dtype.str} "
            f"({math.prod(shape) * dtype.itemsize} bytes)",
        )
    try:
        arr = np.frombuffer(data, dtype=dtype).reshape(shape)
    except ValueError as exc:  # an empty array with an absurd dimension
        _fail(shape_at, str(exc))
    arr.flags.writeable = False
    return arr


# ---------------------------------------------------------------- point sets

_PS_ARRAYS: Final[tuple[tuple[str, np.dtype[Any], int], ...]] = (
    ("freq_hz", F8, 1),
    ("h1", C16, 2),
    ("h2", C16, 2),
    ("coherence", F8, 2),
    ("gff", F8, 1),
    ("gxx", F8, 2),
    ("gfx", C16, 2),
)
_PS_SCALARS: Final = (
    "id",
    "test",
    "point",
    "version",
    "seq",
    "completed_utc",
    "roving_mode",
    "drive_point",
    "response_labels",
    "response_points",
    "n_averages",
)
_PS_FIELDS: Final = (*_PS_SCALARS, *(name for name, _, _ in _PS_ARRAYS), "hits", "meta")
_HIT_FIELDS: Final = (
    "trigger_index",
    "utc",
    "accepted",
    "peak_force_n",
    "pulse_width_s",
    "findings",
    "data",
)
_SUMMARY_FIELDS: Final = ("id", "test", "point", "version", "seq", "completed_utc", "n_averages")


def _scalars(get: Callable[[str], Any], where: str) -> dict[str, Any]:
    """The checked scalar fields of a point set (from an object or a record)."""

    def at(key: str) -> str:
        return _at(where, key)

    return {
        "id": _int(get("id"), at("id"), 0),
        "test": _str(get("test"), at("test"), nonempty=True),
        "point": _str(get("point"), at("point"), nonempty=True),
        "version": _int(get("version"), at("version"), 1),
        "seq": _int(get("seq"), at("seq"), 0),
        "completed_utc": _str(get("completed_utc"), at("completed_utc")),
        "roving_mode": _choice(get("roving_mode"), at("roving_mode"), ROVING_MODES),
        "drive_point": _str(get("drive_point"), at("drive_point")),
        "response_labels": _strs(get("response_labels"), at("response_labels")),
        "response_points": _strs(get("response_points"), at("response_points")),
        "n_averages": _int(get("n_averages"), at("n_averages"), 0),
    }


def _check_shapes(scalars: Mapping[str, Any], shapes: Mapping[str, tuple[int, ...]]) -> None:
    n_resp = len(scalars["response_labels"])
    if len(scalars["response_points"]) != n_resp:
        _fail(
            "response_points",
            f"{len(scalars['response_points'])} entries for {n_resp} response labels",
        )
    n_freq = shapes["freq_hz"][0]
    for name, _, ndim in _PS_ARRAYS[1:]:
        want = (n_freq,) if ndim == 1 else (n_resp, n_freq)
        if shapes[name] != want:
            _fail(
                f"{name}.shape",
                f"{list(shapes[name])} does not fit {n_resp} responses × "
                f"{n_freq} frequencies (expected {list(want)})",
            )


def _findings(value: Any, where: str) -> tuple[tuple[str, str], ...]:
    findings = []
    for i, pair in enumerate(_seq(value, where)):
        at = f"{where}[{i}]"
        items = _seq(pair, at)
        if len(items) != 2:
            _fail(at, f"expected [code, text], got {len(items)} items")
        findings.append((_str(items[0], f"{at}[0]"), _str(items[1], f"{at}[1]")))
    return tuple(findings)


def _hit_to_obj(h: WireHit, where: str, with_data: bool) -> dict[str, Any]:
    findings = [list(pair) for pair in _findings(h.findings, _at(where, "findings"))]
    data = None
    if with_data and h.data is not None:
        data = array_to_obj(h.data, F4, 2, _at(where, "data"))
    return {
        "trigger_index": _int(h.trigger_index, _at(where, "trigger_index")),
        "utc": _str(h.utc, _at(where, "utc")),
        "accepted": _bool(h.accepted, _at(where, "accepted")),
        "peak_force_n": _float(h.peak_force_n, _at(where, "peak_force_n")),
        "pulse_width_s": _float(h.pulse_width_s, _at(where, "pulse_width_s")),
        "findings": findings,
        "data": data,
    }


def _hit_from_obj(obj: Any, where: str) -> WireHit:
    f = _exact(obj, where, _HIT_FIELDS)
    data = f["data"]
    return WireHit(
        trigger_index=_int(f["trigger_index"], _at(where, "trigger_index")),
        utc=_str(f["utc"], _at(where, "utc")),
        accepted=_bool(f["accepted"], _at(where, "accepted")),
        peak_force_n=_float(f["peak_force_n"], _at(where, "peak_force_n")),
        pulse_width_s=_float(f["pulse_width_s"], _at(where, "pulse_width_s")),
        findings=_findings(f["findings"], _at(where, "findings")),
        data=None if data is None else array_from_obj(data, F4, 2, _at(where, "data")),
    )


def point_set_to_obj(ps: WirePointSet, with_hits: bool) -> dict[str, Any]:
    """The msgpack-ready object of `ps` (arrays as ``{"dtype", "shape", "data"}``).

    with_hits: include each hit's raw record; without, hits are listed with ``"data": None``
    (their times, measures and findings are small; the records are most of the bytes).
    SchemaError if `ps` breaks the schema (types, dtypes, shapes that disagree).
    """
    scalars = _scalars(lambda k: getattr(ps, k), "")
    encoded = {name: array_to_obj(getattr(ps, name), d, n, name) for name, d, n in _PS_ARRAYS}
    _check_shapes(scalars, {name: tuple(a["shape"]) for name, a in encoded.items()})
    hits = [_hit_to_obj(h, f"hits[{i}]", with_hits) for i, h in enumerate(_seq(ps.hits, "hits"))]
    out: dict[str, Any] = {"schema": SCHEMA_VERSION}
    out.update(scalars)
    out["response_labels"] = list(scalars["response_labels"])
    out["response_points"] = list(scalars["response_points"])
    out.update(encoded)
    out["hits"] = hits
    out["meta"] = _meta(ps.meta, "meta")
    return out


def point_set_from_obj(obj: Any) -> WirePointSet:
    """The `WirePointSet` of a `point_set_to_obj` object (as `unpack` gives it back).

    Strict: SchemaError naming the field for a missing or extra field, a wrong type, a dtype
    other than the field's, a shape that does not match its bytes or the other arrays.
    """
    f = _fields(obj, "", _PS_FIELDS)
    scalars = _scalars(f.__getitem__, "")
    arrays: dict[str, Any] = {
        name: array_from_obj(f[name], d, n, name) for name, d, n in _PS_ARRAYS
    }
    _check_shapes(scalars, {name: a.shape for name, a in arrays.items()})
    hits = tuple(_hit_from_obj(h, f"hits[{i}]") for i, h in enumerate(_seq(f["hits"], "hits")))
    return WirePointSet(**scalars, **arrays, hits=hits, meta=_meta(f["meta"], "meta"))


def point_set_summary_json(summary: PointSetSummaryLike) -> dict[str, Any]:
    """The JSON-ready object of a point set in a listing (no arrays, no hits).

    Takes anything with the fields of `WirePointSetSummary`: the store's summary rows or a
    `WirePointSet`. Also msgpack-ready.
    """
    s = summary
    return {
        "schema": SCHEMA_VERSION,
        "id": _int(s.id, "id", 0),
        "test": _str(s.test, "test", nonempty=True),
        "point": _str(s.point, "point", nonempty=True),
        "version": _int(s.version, "version", 1),
        "seq": _int(s.seq, "seq", 0),
        "completed_utc": _str(s.completed_utc, "completed_utc"),
        "n_averages": _int(s.n_averages, "n_averages", 0),
    }


def point_set_summary_from_json(obj: Any) -> WirePointSetSummary:
    """The `WirePointSetSummary` of a `point_set_summary_json` object (strict)."""
    f = _fields(obj, "", _SUMMARY_FIELDS)
    return WirePointSetSummary(
        id=_int(f["id"], "id", 0),
        test=_str(f["test"], "test", nonempty=True),
        point=_str(f["point"], "point", nonempty=True),
        version=_int(f["version"], "version", 1),
        seq=_int(f["seq"], "seq", 0),
        completed_utc=_str(f["completed_utc"], "completed_utc"),
        n_averages=_int(f["n_averages"], "n_averages", 0),
    )


# ---------------------------------------------------------------- tests and changes

_TEST_FIELDS: Final = (
    "name",
    "roving_mode",
    "reference",
    "averages",
    "created_utc",
    "seq",
    "grid",
    "meta",
)
_DIRECTION: Final = re.compile(r"[+-][xyz]")
_CHANGE_FIELDS: Final = ("seq", "kind", "test", "point_set_id")


def _grid(rows: Any, where: str) -> list[GridRow]:
    grid: list[GridRow] = []
    seen: set[str] = set()
    for i, row in enumerate(_seq(rows, where)):
        at = f"{where}[{i}]"
        items = _seq(row, at)
        if len(items) != 5:
            _fail(at, f"expected [label, x, y, z, direction], got {len(items)} items")
        label = _str(items[0], f"{at}[0]", nonempty=True)
        if label in seen:
            _fail(f"{at}[0]", f"label {label!r} appears twice")
        seen.add(label)
        x, y, z = (_float(items[k], f"{at}[{k}]", finite=True) for k in (1, 2, 3))
        direction = _str(items[4], f"{at}[4]")
        if not _DIRECTION.fullmatch(direction):
            _fail(f"{at}[4]", f"{direction!r} is not one of +x -x +y -y +z -z")
        grid.append((label, x, y, z, direction))
    if not grid:
        _fail(where, "a test needs at least one grid point")
    return grid


def _test_fields(get: Callable[[str], Any]) -> dict[str, Any]:
    grid = _grid(get("grid"), "grid")
    reference = _str(get("reference"), "reference")
    mode = _choice(get("roving_mode"), "roving_mode", ROVING_MODES)
    # Roving hammer: where the first sensor sits, which may be off the grid ("x,y,z", m) or
    # not yet known (""); roving sensor: the struck point, always a label of the grid.
    if mode != "hammer" and reference not in {row[0] for row in grid}:
        _fail("reference", f"{reference!r} is not a label of the grid")
    return {
        "name": _str(get("name"), "name", nonempty=True),
        "roving_mode": mode,
        "reference": reference,
        "averages": _int(get("averages"), "averages", 1),
        "created_utc": _str(get("created_utc"), "created_utc"),
        "seq": _int(get("seq"), "seq", 0),
        "grid": grid,
        "meta": _meta(get("meta"), "meta"),
    }


def test_to_obj(test: WireTest) -> dict[str, Any]:
    """The object of `test`; it has no arrays, so it is both JSON- and msgpack-ready."""
    out: dict[str, Any] = {"schema": SCHEMA_VERSION}
    out.update(_test_fields(lambda k: getattr(test, k)))
    out["grid"] = [list(row) for row in out["grid"]]
    return out


def test_from_obj(obj: Any) -> WireTest:
    """The `WireTest` of a `test_to_obj` object, from JSON or msgpack (strict)."""
    f = _test_fields(_fields(obj, "", _TEST_FIELDS).__getitem__)
    f["grid"] = tuple(f["grid"])
    return WireTest(**f)


def _change_fields(get: Callable[[str], Any]) -> dict[str, Any]:
    kind = _choice(get("kind"), "kind", CHANGE_KINDS)
    ps_id = get("point_set_id")
    if kind == "test" and ps_id is not None:
        _fail("point_set_id", "must be null for a test change")
    if kind == "point_set":
        ps_id = _int(ps_id, "point_set_id", 0)
    return {
        "seq": _int(get("seq"), "seq", 0),
        "kind": kind,
        "test": _str(get("test"), "test", nonempty=True),
        "point_set_id": ps_id,
    }


def change_to_obj(change: WireChange) -> dict[str, Any]:
    """The object of a change-feed entry; both JSON- and msgpack-ready."""
    return {"schema": SCHEMA_VERSION, **_change_fields(lambda k: getattr(change, k))}


def change_from_obj(obj: Any) -> WireChange:
    """The `WireChange` of a `change_to_obj` object, from JSON or msgpack (strict)."""
    return WireChange(**_change_fields(_fields(obj, "", _CHANGE_FIELDS).__getitem__))


test_to_obj.__test__ = False  # type: ignore[attr-defined]  # not pytest tests
test_from_obj.__test__ = False  # type: ignore[attr-defined]


# ---------------------------------------------------------------- msgpack


SPLICE_MIN = 1 << 16  # bytes: bins this large are spliced in, not copied by the packer


def pack(obj: Any) -> bytes:
    """msgpack bytes of `obj` (str as str, bytes as bin); SchemaError if it cannot be packed.

    Exactly msgpack.packb's output. Large bins (array data) are packed as short
    placeholders and joined in afterwards, so their bytes are copied once, by one join,
    instead of through the packer's growing buffer: about twice as fast for point sets.
    """
    big: list[bytes | memoryview] = []
    light = _lighten(obj, big)
    try:
        data: bytes = msgpack.packb(light, use_bin_type=True, datetime=False)
    except (TypeError, ValueError, OverflowError) as exc:
        raise SchemaError(f"cannot pack as msgpack: {exc}") from exc
    if not big:
        return data
    parts: list[bytes | memoryview] = []
    pos = 0
    for k, blob in enumerate(big):
        marker = _marker(k)
        at = data.index(marker, pos)
        # bin 32: 0xc6 then the length as a big-endian u32 (the msgpack spec, "bin format
        # family"); msgpack itself uses it for every bin of 65536 bytes or more.
        parts += [data[pos:at], b"\xc6", len(blob).to_bytes(4, "big"), blob]
        pos = at + len(marker)
    parts.append(data[pos:])
    return b"".join(parts)


_MARK = b"\x00taprig-splice\x00"


def _marker(k: int) -> bytes:
    """The packed placeholder of the k-th large bin: a bin 8 that no real bin can equal
    (real large bins are never this short)."""
    body = _MARK + k.to_bytes(4, "big")
    return b"\xc4" + bytes([len(body)]) + body


def _lighten(obj: Any, big: list[bytes | memoryview]) -> Any:
    """`obj` with every bin of SPLICE_MIN bytes or more replaced by a numbered placeholder."""
    if isinstance(obj, bytes | bytearray | memoryview) and len(obj) >= SPLICE_MIN:
        big.append(obj if isinstance(obj, bytes) else memoryview(obj).cast("B"))
        return _marker(len(big) - 1)[2:]
    if isinstance(obj, dict):
        return {k: _lighten(v, big) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_lighten(v, big) for v in obj]
    return obj


def _no_ext(code: int, data: bytes) -> NoReturn:
    raise SchemaError(f"msgpack extension type {code} is not part of this schema")


def unpack(data: bytes, *, max_bytes: int) -> Any:
    """The object of one msgpack message `data`; SchemaError for anything else.

    Refused with SchemaError: more than `max_bytes` bytes; truncated input or bytes after the
    object; a str that is not UTF-8; a map key that is not a str (strict_map_key); any
    extension type (msgpack's timestamp too); nesting deeper than msgpack's stack.

    Limits: every declared length is bounded by `n = len(data)` (≤ max_bytes): a str or bin
    of L bytes needs L bytes, an array of L items at least L bytes, a map of L pairs at least
    2L, so max_str_len = max_bin_len = max_array_len = n and max_map_len = n // 2 refuse
    nothing valid, while a header that declares more than the message could hold (a 5-byte
    array header of 4 × 10⁹ items) is refused as soon as it is read, before anything is
    allocated for it, whatever the unpacker's allocation strategy.
    """
    if max_bytes < 0:
        raise ValueError(f"max_bytes must be >= 0, got {max_bytes}")
    if not isinstance(data, bytes | bytearray | memoryview):
        raise SchemaError(f"expected bytes, got {type(data).__name__}")
    n = memoryview(data).nbytes
    if n > max_bytes:
        raise SchemaError(f"message of {n} bytes is larger than the limit of {max_bytes} bytes")
    try:
        return msgpack.unpackb(
            data,
            raw=False,
            use_list=True,
            strict_map_key=True,
            max_bin_len=n,
            max_str_len=n,
            max_array_len=n,
            max_map_len=n // 2,
            max_ext_len=0,
            ext_hook=_no_ext,
        )
    except SchemaError:
        raise
    except Exception as exc:  # the C unpacker raises ValueError subclasses, also others
        raise SchemaError(f"not a valid msgpack message: {type(exc).__name__}: {exc}") from exc


# ---------------------------------------------------------------- negotiation, checksums

_MEDIA_RANGE = re.compile(r"\s*([^\s/;,]+)/([^\s/;,]+)\s*((?:;[^,]*)?)")
_Q_PARAM = re.compile(r";\s*q\s*=\s*([^;\s]*)", re.I)
_QVALUE = re.compile(r"0(?:\.[0-9]{0,3})?|1(?:\.0{0,3})?")  # RFC 9110 §12.4.2


def _accept_quality(accept: str, media_type: str) -> tuple[float, int]:
    """(q, specificity) of the most specific media range of `accept` matching `media_type`.

    RFC 9110 §12.5.1: the most specific range wins (type/subtype 2, type/* 1, */* 0) and
    gives its q; q=0 means "not acceptable". (0.0, -1) if nothing matches.
    """
    kind, sub = media_type.split("/")
    best = (0.0, -1)
    for part in accept.split(","):
        m = _MEDIA_RANGE.fullmatch(part)
        if not m:
            continue
        t, s, params = m.group(1).lower(), m.group(2).lower(), m.group(3)
        if (t, s) == (kind, sub):
            spec = 2
        elif t == kind and s == "*":
            spec = 1
        elif (t, s) == ("*", "*"):
            spec = 0
        else:
            continue
        q_match = _Q_PARAM.search(params)
        if q_match and not _QVALUE.fullmatch(q_match.group(1)):
            continue  # a malformed q: the range is ignored
        q = float(q_match.group(1)) if q_match else 1.0
        if spec > best[1]:
            best = (q, spec)
    return best


def wants_msgpack(accept_header: str | None) -> bool:
    """Whether to answer `MSGPACK` (True) rather than `JSON` (False) to this Accept header.

    msgpack when it is acceptable (q > 0) and preferred: a higher q than JSON's, or the same
    q from a more specific range (``MSGPACK, */*`` → msgpack). Otherwise JSON, also for no
    header and for ``*/*`` alone, so that curl and browsers get readable answers.
    """
    if not accept_header:
        return False
    mp = _accept_quality(accept_header, MSGPACK)
    js = _accept_quality(accept_header, JSON)
    return mp[0] > 0 and mp > js


def digest(data: bytes) -> str:
    """SHA-256 of `data` as 64 lower-case hex digits (FIPS 180-4), to verify a transfer."""
    return hashlib.sha256(data).hexdigest()


def content_digest(body: bytes | memoryview) -> str:
    """The Content-Digest header value of `body`: its SHA-256 (RFC 9530 §2), as the rig sends."""
    return "sha-256=:" + base64.b64encode(hashlib.sha256(body).digest()).decode() + ":"


def digest_matches(header: str | None, body: bytes | memoryview) -> bool:
    """True when a Content-Digest header carries the SHA-256 of `body` (other algorithms in
    the same header are ignored; no sha-256 entry at all is a mismatch)."""
    want = content_digest(body)[len("sha-256=") :]
    for entry in (header or "").split(","):
        name, _, value = entry.strip().partition("=")
        if name.strip().lower() == "sha-256" and value.strip() == want:
            return True
    return False
