"""schema/outline.py: the outline format both sides read, checked without drawing anything."""

from __future__ import annotations

import pytest

from taprig.schema.outline import (
    MAX_CHARS,
    META_KEY,
    OutlineError,
    outline_of,
    parse_outline,
    plane_of,
)

GRID = [("A1", 0.0, 0.0, 0.0, "+z"), ("A2", 0.1, 0.0, 0.0, "+z"),
        ("B1", 0.0, 0.1, 0.0, "+z"), ("B2", 0.1, 0.1, 0.0, "+z")]  # fmt: skip


def test_a_good_outline_keeps_its_records_in_order() -> None:
    """Added points follow the grid's; a quad is split along its first diagonal; a face's
    points are kept once each in the order given; a line is its consecutive pairs."""
    text = "point R1 0 0.1 -0.1 +y\nface top\npoints A1 A2 B1 B2 A1\nface back\n" \
           "quad B1 B2 R1 A1\nline A1 A2 B2\n"  # fmt: skip
    got = parse_outline(text, GRID)
    assert got.labels == ("A1", "A2", "B1", "B2", "R1")
    assert got.xyz[4] == (0.0, 0.1, -0.1) and got.directions[4] == "+y"
    top, back = got.faces
    assert (top.name, top.line, top.points, top.triangles) == ("top", 2, (0, 1, 2, 3), ())
    assert back.triangles == ((2, 3, 4), (2, 4, 0)) and back.line == 4
    assert got.lines == ((0, 1), (1, 3))
    assert got.rows[4] == ("R1", 0.0, 0.1, -0.1, "+y")


@pytest.mark.parametrize(
    ("text", "words"),
    [
        ("face f\npoints A1 A2\n", "outline line 1: face 'f' has 2 points; a face needs 3"),
        ("point Q 0 0 0\nface f\npoints A1 Q A2 B1\n", "outline line 2: face 'f' has two points"),
        ("point A1 0 0 1e400\n", "outline line 1: point 'A1': coordinates must be finite"),
        ("point Q 1 2 3\npoint Q 1 2 3\n", "outline line 2: point 'Q' already added on line 1"),
    ],
)
def test_bad_outlines_name_their_line(text: str, words: str) -> None:
    with pytest.raises(OutlineError) as caught:
        parse_outline(text, GRID)
    assert str(caught.value).startswith(words), caught.value


def test_size_limit_and_the_meta_key() -> None:
    with pytest.raises(OutlineError, match="an outline holds"):
        parse_outline("#" * (MAX_CHARS + 1), GRID)
    assert outline_of({META_KEY: "face f\n"}) == "face f\n"
    assert outline_of({META_KEY: "  "}) is None and outline_of({}) is None


def test_plane_of_a_tilted_square() -> None:
    """The least-squares plane of four points on z = x: normal ±(−1, 0, 1)/√2 and nothing
    off the plane (the plane through three points, any textbook of analytic geometry)."""
    import numpy as np

    pts = np.array([[0, 0, 0], [1, 0, 1], [0, 1, 0], [1, 1, 1]], dtype=float)
    _, frame, off = plane_of(pts)
    assert abs(abs(frame[2] @ np.array([-1, 0, 1]) / np.sqrt(2)) - 1) < 1e-12
    assert off < 1e-12
