"""The point set, declared once: its fields, and for each array its dtype, dimensions and unit.

A point set is everything measured at one grid point of one test. Its fields are declared
here, once, as two generic base records that every form of a point set extends:

- `PointSetFields`: the daemon's `PointSet` (hits as stored) and the wire's `WirePointSet`
  (hits as sent, plus the store's id) add nothing else;
- `HitFields`: the daemon's `StoredHit` and the wire's `WireHit`, which differ only in how a
  finding is written.

Each array field carries an `ArraySpec` in its metadata: the table below is *derived* from
those declarations (`ARRAYS`, `HIT_DATA`), and the wire codec, the store's columns and both
shape checks are derived from the table. Adding an array is one line here.

=========  =========  ==========  =====================  ======================================
field      dtype      dimensions  unit                   meaning
=========  =========  ==========  =====================  ======================================
freq_hz    <f8        (F,)        Hz                     frequency lines
h1, h2     <c8        (R, F)      (m/s²)/N               H1 and H2 estimates of the accelerance
coherence  <f4        (R, F)      1                      ordinary coherence γ²
gff        <f4        (F,)        N²/Hz                  one-sided force auto spectrum
gxx        <f4        (R, F)      (m/s²)²/Hz             one-sided response auto spectra
gfx        <c8        (R, F)      (m/s²)·N/Hz            one-sided force-response cross spectra
hit data   <i2 <i4    (C, N)      counts (SI: × scale)   a hit's record, optional (None): the
           <f4                                           device's integer codes, or SI values
hit scale  <f8        (C,)        SI units per count     per channel N or m/s² per code; with
                                                         and only with the record
=========  =========  ==========  =====================  ======================================

Dimensions (`DIMS`): R = len(response_labels) responses, F frequency lines, C channels of a
hit record, N samples of a hit record. Every array has exactly its dtype on the wire and in
the store (little-endian, C order), a hit's record one of its three; `check_shapes` holds
the arrays of one point set to one R and one F.

A hit's record (schema 3) is what the device sent: its integer codes, `<i2` when every
channel's converter has at most 16 bits, `<i4` otherwise, with `scale` (SI units per code of
each channel: volts per code × the sensor's SI units per volt, float64), so that
``data * scale[:, None]`` is the record in N and m/s² (`hit_si`, `HitFields.si`, the one
conversion). A device without codes (float32 samples, a text board) gives float32 SI values
and a scale of 1.0. Schemas 1 and 2 kept float32 SI values and no scale: their hits are read
as float32 data with a scale of 1.0 (`HIT_DATA_SINCE`).

Times (`completed_utc`, a hit's `utc`) are ISO 8601 UTC with milliseconds and a ``Z``, as
`utc_now` writes them.

Precision (schema 2): the spectra are IEEE 754-2008 binary32 (float32; complex64 is two of
them): a 24-bit significand, so about 7 significant decimal digits, a relative rounding error
of at most 2⁻²⁴ ≈ 6.0e-8 per stored value (machine epsilon 2⁻²³ ≈ 1.2e-7), and a range of
about 1.2e-38 to 3.4e38 (smaller magnitudes down to 1.4e-45 as subnormals, with fewer
digits). The spectra are computed in float64 and rounded once, when stored. That is far
finer than an impact test measures: ADCs give 16 to 24 bits, and averaged FRFs of a few taps
carry relative errors of 1e-3 and more. Frequencies stay float64: the modal fit takes line
spacings from them. Schema 1 stored the spectra as float64 / complex128 (`ArraySpec.v1`):
bodies, stores and mirrors written then are read and their spectra rounded to the dtypes
above (`SCHEMA_DTYPES`).
"""

from __future__ import annotations

import dataclasses
import datetime as dt
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, Final, Generic, TypeVar

import numpy as np

I2: Final = np.dtype("<i2")
I4: Final = np.dtype("<i4")
F4: Final = np.dtype("<f4")
F8: Final = np.dtype("<f8")
C8: Final = np.dtype("<c8")
C16: Final = np.dtype("<c16")
ARRAY_DTYPES: Final[Mapping[str, np.dtype[Any]]] = {d.str: d for d in (I2, I4, F4, F8, C8, C16)}
"""The only dtypes an array of a point set may have, by their numpy code."""

DIMS: Final[Mapping[str, str]] = {
    "R": "responses",
    "F": "frequency lines",
    "C": "channels",
    "N": "samples",
}
"""What each symbolic dimension counts."""


@dataclass(frozen=True, slots=True)
class ArraySpec:
    """One array of a point set (a row of the table).

    name: the field's name in every record and on the wire. dtype: its dtype. dims:
    symbolic dimensions, keys of `DIMS`. unit: SI unit of its values. column: the store's
    column for it. optional: None is allowed (a hit fetched without its record). v1: its
    dtype in schema 1 where that differs (None: the same). also: other dtypes it may have
    (the hit record: integer codes), besides `dtype`. since: the first schema version that
    has the field.
    """

    dtype: np.dtype[Any]
    dims: tuple[str, ...]
    unit: str
    column: str = ""
    optional: bool = False
    name: str = ""
    v1: np.dtype[Any] | None = None
    also: tuple[np.dtype[Any], ...] = ()
    since: int = 1

    @property
    def ndim(self) -> int:
        return len(self.dims)

    @property
    def allowed(self) -> tuple[np.dtype[Any], ...]:
        """Every dtype the field may have today."""
        return (*self.also, self.dtype)


def _array(
    dtype: np.dtype[Any],
    dims: str,
    unit: str,
    column: str = "",
    optional: bool = False,
    v1: np.dtype[Any] | None = None,
    also: tuple[np.dtype[Any], ...] = (),
    since: int = 1,
) -> dict[str, ArraySpec]:
    """Field metadata of an array: `dims` as letters ("RF" for (R, F))."""
    spec = ArraySpec(dtype, tuple(dims), unit, column, optional, v1=v1, also=also, since=since)
    return {"array": spec}


FindingT = TypeVar("FindingT", covariant=True)
HitT = TypeVar("HitT", covariant=True)


@dataclass(frozen=True, slots=True, eq=False)
class HitFields(Generic[FindingT]):
    """One hit kept with its point set.

    trigger_index: device sample index at which the force crossed the trigger level.
    utc: when the hit was taken (ISO 8601 UTC). accepted: whether it went into the average.
    peak_force_n: peak hammer force, N (NaN if unknown). pulse_width_s: force pulse width, s
    (NaN if unknown). findings: what the checks said, rejections and warnings.
    data: (channels, block) record, channel order of the rig's configuration: the device's
    integer codes (int16 or int32), or float32 SI values (N, m/s²) from a device without
    codes; None when the point set was read without raw hits. scale: (channels,) float64 SI
    units per code, given exactly when data is (1.0 for SI values); `si()` is the record in
    SI units.
    """

    trigger_index: int
    utc: str
    accepted: bool
    peak_force_n: float
    pulse_width_s: float
    findings: tuple[FindingT, ...]
    data: np.ndarray | None = field(
        metadata=_array(F4, "CN", "counts (SI: × scale)", "data", True, also=(I2, I4))
    )
    scale: np.ndarray | None = field(
        default=None, metadata=_array(F8, "C", "SI units per count", "scale", True, since=3)
    )

    def si(self) -> np.ndarray | None:
        """The record in SI units (N, m/s²), float64 (channels, block); None without one."""
        return None if self.data is None else hit_si(self.data, self.scale)


@dataclass(frozen=True, slots=True, eq=False, kw_only=True)
class PointSetFields(Generic[HitT]):
    """Everything measured at one grid point of one test (fields in their order on the wire).

    version: 1, 2, ... for repeated measurements of the same point (0 before the store has
    numbered it). seq: its number in the change feed (0 before commit). completed_utc: when
    it was completed ("" until known). roving_mode: "hammer" or "sensor"; in "hammer" mode
    drive_point is the tapped point and response_points are the fixed sensors' points; in
    "sensor" mode drive_point is the fixed reference. response_labels[i] names the sensor of
    row i of every (R, F) array. Arrays: see the module's table. meta: plain JSON values.
    """

    test: str
    point: str
    version: int
    seq: int = 0
    completed_utc: str = ""
    roving_mode: str
    drive_point: str
    response_labels: tuple[str, ...]
    response_points: tuple[str, ...]
    n_averages: int
    freq_hz: np.ndarray = field(metadata=_array(F8, "F", "Hz", "freq"))
    h1: np.ndarray = field(metadata=_array(C8, "RF", "(m/s²)/N", "h1", v1=C16))
    h2: np.ndarray = field(metadata=_array(C8, "RF", "(m/s²)/N", "h2", v1=C16))
    coherence: np.ndarray = field(metadata=_array(F4, "RF", "1", "coherence", v1=F8))
    gff: np.ndarray = field(metadata=_array(F4, "F", "N²/Hz", "gff", v1=F8))
    gxx: np.ndarray = field(metadata=_array(F4, "RF", "(m/s²)²/Hz", "gxx", v1=F8))
    gfx: np.ndarray = field(metadata=_array(C8, "RF", "(m/s²)·N/Hz", "gfx", v1=C16))
    hits: tuple[HitT, ...]
    meta: dict[str, Any] = field(default_factory=dict)


def _specs(cls: type) -> tuple[ArraySpec, ...]:
    return tuple(
        dataclasses.replace(f.metadata["array"], name=f.name)
        for f in dataclasses.fields(cls)
        if "array" in f.metadata
    )


ARRAYS: Final = _specs(PointSetFields)
"""The table: the point set's arrays in their order on the wire and in the store."""
HIT_DATA, HIT_SCALE = _specs(HitFields)
"""The arrays of a hit: its record and the record's scale."""
HIT_ARRAYS: Final = (HIT_DATA, HIT_SCALE)
HIT_DATA_SINCE: Final = HIT_SCALE.since
"""The first schema version whose hit records are integer codes with a scale: older hits are
float32 SI values (read with a scale of 1.0)."""

SCHEMA_DTYPES: Final[Mapping[int, Mapping[str, np.dtype[Any]]]] = {
    1: {a.name: a.v1 or a.dtype for a in (*ARRAYS, HIT_DATA)},
    2: {a.name: a.dtype for a in (*ARRAYS, HIT_DATA)},
    3: {a.name: a.dtype for a in (*ARRAYS, *HIT_ARRAYS)},
}
"""Each array's dtype on the wire and in the store, by schema version (the versions read);
from schema 3 the hit record may also have the dtypes of `HIT_DATA.also`."""

SCALARS: Final = tuple(
    f.name
    for f in dataclasses.fields(PointSetFields)
    if "array" not in f.metadata and f.name not in ("hits", "meta")
)
"""The point set's fields that are neither arrays nor hits nor meta, in their wire order."""
HIT_SCALARS: Final = tuple(
    f.name
    for f in dataclasses.fields(HitFields)
    if "array" not in f.metadata and f.name != "findings"
)
"""A hit's plain fields (not its findings, not its record)."""


def field_values(record: PointSetFields[Any]) -> dict[str, Any]:
    """The scalars, arrays and meta of `record` by name (hits left out; arrays not copied).

    Plain Python types: roving_mode a str, response labels and points tuples, meta a dict.
    """
    out = {name: getattr(record, name) for name in (*SCALARS, *(a.name for a in ARRAYS))}
    out["roving_mode"] = str(record.roving_mode)  # a str also for a str enum member
    out["response_labels"] = tuple(record.response_labels)
    out["response_points"] = tuple(record.response_points)
    out["meta"] = dict(record.meta)
    return out


def check_shapes(
    n_labels: int, n_points: int, shapes: Mapping[str, tuple[int, ...]]
) -> tuple[str, str] | None:
    """The first disagreement among a point set's array shapes as (field, message), or None.

    n_labels, n_points: lengths of response_labels and response_points, which must agree (R).
    shapes: the shape of every array of `ARRAYS` by name. Every other dimension takes its size
    from the first array that has it (F from freq_hz), and every array must then have the
    shape its dimensions give.
    """
    if n_points != n_labels:
        return "response_points", f"{n_points} entries for {n_labels} response labels"
    for spec in ARRAYS:
        if len(shapes[spec.name]) != spec.ndim:
            got = list(shapes[spec.name])
            return f"{spec.name}.shape", f"expected {spec.ndim} dimensions, got shape {got}"
    sizes = {"R": n_labels}
    for spec in ARRAYS:
        for dim, n in zip(spec.dims, shapes[spec.name], strict=True):
            sizes.setdefault(dim, n)
    for spec in ARRAYS:
        want = tuple(sizes[d] for d in spec.dims)
        if tuple(shapes[spec.name]) != want:
            fits = " × ".join(f"{n} {DIMS[d]}" for d, n in sizes.items())
            got = list(shapes[spec.name])
            return f"{spec.name}.shape", f"{got} does not fit {fits} (expected {list(want)})"
    return None


def in_dtype(arr: np.ndarray, dtype: np.dtype[Any]) -> np.ndarray:
    """`arr` (read as an older schema stored it) in today's `dtype`, read-only; `arr` itself
    when it has that dtype already. A cast rounds to nearest (float64 → float32)."""
    if arr.dtype == dtype:
        return arr
    out = arr.astype(dtype)
    out.flags.writeable = False
    return out


def utc_now() -> str:
    """The current time as the point set writes times: ISO 8601 UTC, milliseconds, ``Z``."""
    return dt.datetime.now(dt.UTC).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def hit_si(data: np.ndarray, scale: np.ndarray | None) -> np.ndarray:
    """A hit's record in SI units (N, m/s²): ``data * scale[:, None]`` in float64.

    data: (C, N) codes or float32 SI values; scale: (C,) SI units per code, None for 1.0 (a
    hit of schema 1 or 2 read without one). The one conversion from a stored record to SI.
    """
    si = np.asarray(data, dtype=np.float64)
    return si if scale is None else si * np.asarray(scale, dtype=np.float64)[:, None]


def hit_record(
    si: np.ndarray, per_count: np.ndarray | None, bits: int = 32
) -> tuple[np.ndarray, np.ndarray]:
    """(data, scale) to keep of a record `si` (C, N) in SI units, float64, that a device made
    from integer codes as code × `per_count` (C,) (SI units per code of each channel).

    data: the codes, ``rint(si / per_count)``: `<i2` when `bits` (the widest converter of
    the record's channels) is at most 16 and every code fits, else `<i4`; scale: `per_count`
    as float64. per_count None (no codes: a float32 device or a text board): data is `si`
    rounded to float32 and the scale 1.0. ValueError for codes beyond 32 bits.
    """
    c = si.shape[0]
    if per_count is None:
        return si.astype(F4), np.ones(c, dtype=F8)
    scale = np.ascontiguousarray(per_count, dtype=F8)
    if scale.shape != (c,):
        raise ValueError(f"scale: {scale.shape} does not fit a record of {c} channels")
    codes = np.rint(si / scale[:, None])
    lo, hi = (float(codes.min()), float(codes.max())) if codes.size else (0.0, 0.0)
    for dtype in (I2, I4) if bits <= 16 else (I4,):
        info = np.iinfo(dtype)
        if info.min <= lo and hi <= info.max:
            return codes.astype(dtype), scale
    raise ValueError(f"data: codes {lo:.0f}..{hi:.0f} do not fit 32 bits")


def check_hit_record(data: np.ndarray | None, scale: np.ndarray | None) -> tuple[str, str] | None:
    """The first fault of a hit's record and scale as (field, message), or None.

    Both None (a hit without its record), or: data (C, N) of a dtype of `HIT_DATA.allowed`
    and scale (C,) float64, finite and positive.
    """
    d, s = HIT_DATA, HIT_SCALE
    if data is None:
        return None if scale is None else (s.name, "given without a record (data is null)")
    if data.dtype not in d.allowed:
        return f"{d.name}.dtype", f"{data.dtype.str} is not one of {_codes(d.allowed)}"
    if data.ndim != d.ndim:
        return f"{d.name}.shape", f"expected {d.ndim} dimensions, got shape {list(data.shape)}"
    if scale is None:
        return s.name, "missing: a record needs its scale (SI units per count)"
    if scale.dtype != s.dtype:
        return f"{s.name}.dtype", f"expected {s.dtype.str}, got {scale.dtype.str}"
    if scale.shape != data.shape[:1]:
        return f"{s.name}.shape", (
            f"{list(scale.shape)} does not fit a record of {data.shape[0]} channels "
            f"(expected [{data.shape[0]}])"
        )
    if not bool(np.all(np.isfinite(scale) & (scale > 0))):
        return s.name, f"must be finite and positive, got {scale.tolist()}"
    return None


def _codes(dtypes: tuple[np.dtype[Any], ...]) -> str:
    return ", ".join(d.str for d in dtypes)
