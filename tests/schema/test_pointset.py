"""The point set's one declaration (schema.pointset): the table, the shape check, the clock.

Units: an FRF of acceleration over force is the accelerance, (m/s²)/N, and one-sided auto
and cross spectra carry (unit)²/Hz (Bendat & Piersol, "Random Data", 4th ed. 2010, §5.2;
from memory); the table states exactly these. ISO 8601 times with a ``Z`` suffix are UTC
(ISO 8601-1:2019 §4.3.13, from memory); Python's `datetime.fromisoformat` reads them.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import re

import numpy as np
import pytest

from taprig.schema import pointset
from taprig.schema.pointset import ARRAYS, F8, HIT_DATA, HIT_SCALE, check_shapes

from .fixtures import ARRAYS as PUBLISHED
from .fixtures import make_point_set


def test_the_table_is_the_published_schema() -> None:
    """Names in wire order, one little-endian dtype each, symbolic dimensions and SI units;
    schema 2's spectra in float32 / complex64, schema 1's in float64 / complex128."""
    table = {a.name: (a.dtype.str, a.dims, a.unit) for a in ARRAYS}
    assert tuple(table) == PUBLISHED
    assert table["freq_hz"] == ("<f8", ("F",), "Hz")
    assert table["h1"] == table["h2"] == ("<c8", ("R", "F"), "(m/s²)/N")
    assert table["coherence"] == ("<f4", ("R", "F"), "1")
    assert table["gff"] == ("<f4", ("F",), "N²/Hz")
    assert table["gxx"] == ("<f4", ("R", "F"), "(m/s²)²/Hz")
    assert table["gfx"] == ("<c8", ("R", "F"), "(m/s²)·N/Hz")
    v1 = {name: dtype.str for name, dtype in pointset.SCHEMA_DTYPES[1].items()}
    assert v1 == {"freq_hz": "<f8", "h1": "<c16", "h2": "<c16", "coherence": "<f8",
                  "gff": "<f8", "gxx": "<f8", "gfx": "<c16", "data": "<f4"}  # fmt: skip
    assert (HIT_DATA.name, HIT_DATA.dtype.str, HIT_DATA.dims, HIT_DATA.optional) == (
        "data", "<f4", ("C", "N"), True)  # fmt: skip
    assert [d.str for d in HIT_DATA.allowed] == ["<i2", "<i4", "<f4"]
    assert (HIT_SCALE.name, HIT_SCALE.dtype.str, HIT_SCALE.dims, HIT_SCALE.unit) == (
        "scale", "<f8", ("C",), "SI units per count")  # fmt: skip
    assert "scale" not in pointset.SCHEMA_DTYPES[2] and pointset.SCHEMA_DTYPES[3]["scale"] == F8
    assert all(d in pointset.DIMS for a in (*ARRAYS, HIT_DATA) for d in a.dims)


def test_the_module_docstring_shows_the_table() -> None:
    """Every array's row in the docstring names its dtype, dimensions and unit as declared."""
    doc = pointset.__doc__ or ""
    for a in ARRAYS:
        dims = "(" + ", ".join(a.dims) + ("," if a.ndim == 1 else "") + ")"
        rows = [ln for ln in doc.splitlines() if re.match(rf"(\w+, )*{a.name}\b", ln)]
        assert any(a.dtype.str in r and dims in r and a.unit in r for r in rows), a.name
    lines = doc.splitlines()
    for a in pointset.HIT_ARRAYS:  # "hit data" spans two lines: its dtypes do not fit one
        at = next(i for i, ln in enumerate(lines) if ln.startswith(f"hit {a.name} "))
        row = lines[at] + lines[at + 1]
        dims = "(" + ", ".join(a.dims) + ("," if a.ndim == 1 else "") + ")"
        assert all(d.str in row for d in a.allowed) and dims in row and a.unit in row, a.name


def test_scalars_and_field_values() -> None:
    ps = make_point_set()
    values = pointset.field_values(ps)
    assert set(values) == {*pointset.SCALARS, *PUBLISHED, "meta"}
    assert values["h1"] is ps.h1  # arrays are not copied
    assert "hits" not in values and "id" not in values
    names = [f.name for f in dataclasses.fields(pointset.PointSetFields)]
    assert names == [*pointset.SCALARS, *PUBLISHED, "hits", "meta"]


def shapes(n_resp: int, n_freq: int) -> dict[str, tuple[int, ...]]:
    return {a.name: (n_freq,) if a.dims == ("F",) else (n_resp, n_freq) for a in ARRAYS}


@pytest.mark.parametrize(("n_resp", "n_freq"), [(2, 33), (1, 1), (0, 0), (4, 8193)])
def test_consistent_shapes_pass(n_resp: int, n_freq: int) -> None:
    assert check_shapes(n_resp, n_resp, shapes(n_resp, n_freq)) is None


@pytest.mark.parametrize(
    ("name", "shape", "field", "words"),
    [
        ("gxx", (2, 32), "gxx.shape", "[2, 32] does not fit 2 responses × 33 frequency lines"),
        ("h1", (3, 33), "h1.shape", "expected [2, 33]"),
        ("gff", (32,), "gff.shape", "expected [33]"),
        ("gfx", (66,), "gfx.shape", "expected 2 dimensions"),
        ("freq_hz", (), "freq_hz.shape", "expected 1 dimensions"),
    ],
)
def test_disagreeing_shapes_are_named(
    name: str, shape: tuple[int, ...], field: str, words: str
) -> None:
    bad = {**shapes(2, 33), name: shape}
    problem = check_shapes(2, 2, bad)
    assert problem is not None and problem[0] == field and words in problem[1], problem


def test_response_points_must_match_the_labels() -> None:
    assert check_shapes(2, 1, shapes(2, 33)) == (
        "response_points", "1 entries for 2 response labels")  # fmt: skip


def test_frequency_lines_come_from_freq_hz() -> None:
    """F is taken from freq_hz, the first array that has it: every other array is held to it."""
    bad = {**shapes(2, 33), "freq_hz": (34,)}
    problem = check_shapes(2, 2, bad)
    assert problem is not None and problem[0] == "h1.shape" and "34 frequency lines" in problem[1]


def test_utc_now_is_iso_8601_utc_with_milliseconds() -> None:
    before = dt.datetime.now(dt.UTC)
    text = pointset.utc_now()
    after = dt.datetime.now(dt.UTC)
    assert re.fullmatch(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{3}Z", text), text
    when = dt.datetime.fromisoformat(text)
    assert when.utcoffset() == dt.timedelta(0)
    assert before - dt.timedelta(milliseconds=1) <= when <= after


def test_dtypes_are_the_wires_only_ones() -> None:
    every = {d for dtypes in pointset.SCHEMA_DTYPES.values() for d in dtypes.values()}
    every |= set(HIT_DATA.also)  # a hit's record: device codes, from schema 3
    assert every == set(pointset.ARRAY_DTYPES.values())
    assert all(np.dtype(code).byteorder in "<=|" for code in pointset.ARRAY_DTYPES)
