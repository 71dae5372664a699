"""Geometry: automatic triangulation, the outline file and its errors, the flat layout."""

from __future__ import annotations

import itertools
import json

import numpy as np
import pytest
from scipy.spatial import Delaunay

from taprig.client.view.geometry import Geometry, GeometryError, from_grid, triangulate
from taprig.client.view.outline import parse_outline
from taprig.client.view.unfold import unfold
from taprig.firmware_protocol.simpiece import demo_panel

ROWS, COLS = "ABCDE", 6
# the demo's tap grid: 5 rows × 6 columns, 0.1 m apart (x along the columns, y the rows)
GRID = [(f"{r}{c}", 0.1 * (c - 1), 0.1 * i, 0.0, "+z") for i, r in enumerate(ROWS) for c in
        range(1, COLS + 1)]  # fmt: skip
TOP = " ".join(p[0] for p in GRID)


def test_demo_grid_triangulates_into_the_expected_count() -> None:
    """A regular n × m grid has 2(n−1)(m−1) triangles (two per cell), which is also what
    Qhull's Delaunay (scipy.spatial.Delaunay) makes of the same points; the triangles tile
    the panel: their areas add up to its 0.5 m × 0.4 m (plane geometry)."""
    panel = demo_panel()
    rows = [(p, *map(float, panel.coords[panel.index(p)]), "+z") for p in panel.grid]
    geo = from_grid(rows)
    (face,) = geo.faces
    assert len(face.triangles) == 2 * (5 - 1) * (6 - 1) == 40
    assert len(face.triangles) == len(Delaunay(geo.xyz[:, :2]).simplices)
    corners = geo.xyz[face.triangles]
    area = 0.5 * np.abs(np.cross(corners[:, 1] - corners[:, 0], corners[:, 2] - corners[:, 0]))
    span = np.ptp(geo.xyz, axis=0)
    assert area.sum() == pytest.approx(span[0] * span[1], rel=1e-12)
    np.testing.assert_array_equal(face.normal, [0.0, 0.0, 1.0])


def test_a_tilted_face_is_triangulated_in_its_own_plane() -> None:
    """The same grid turned 30° about x and moved still gives 40 triangles of the same total
    area (a rigid motion keeps areas)."""
    turn = np.radians(30.0)
    rot = np.array([[1, 0, 0], [0, np.cos(turn), -np.sin(turn)], [0, np.sin(turn), np.cos(turn)]])
    xyz = np.array([g[1:4] for g in GRID]) @ rot.T + [1.0, 2.0, 3.0]
    tri = triangulate("tilted", xyz, np.arange(len(GRID)))
    corners = xyz[tri]
    area = 0.5 * np.linalg.norm(np.cross(corners[:, 1] - corners[:, 0],
                                         corners[:, 2] - corners[:, 0]), axis=1)  # fmt: skip
    assert len(tri) == 40
    assert area.sum() == pytest.approx(0.5 * 0.4, rel=1e-12)


BOX = f"""# a box-shaped body: its top, and its back folded down along row E
point T1 0.0 0.4 -0.2 +y   # the back's bottom edge
point T6 0.5 0.4 -0.2 +y
face top
points {TOP}
face back
quad E1 E6 T6 T1
line A1 A6 E6
"""


def test_outline_of_a_box_opens_like_a_book() -> None:
    """The back face turns about the shared edge E1–E6 into the top's plane, beyond it, and
    keeps its shape: distances within each face are unchanged (a rigid motion)."""
    geo = parse_outline(BOX, GRID)
    assert [f.name for f in geo.faces] == ["top", "back"]
    assert len(geo.faces[0].triangles) == 40 and geo.faces[1].given
    np.testing.assert_allclose(geo.faces[1].normal, [0.0, 1.0, 0.0], atol=1e-12)
    assert geo.lines.tolist() == [[geo.index("A1"), geo.index("A6")],
                                  [geo.index("A6"), geo.index("E6")]]  # fmt: skip
    flat = unfold(geo)
    for face_vertices in (flat.point[:30], flat.point[30:]):
        v = np.flatnonzero(np.isin(flat.point, face_vertices))[: len(face_vertices)]
        for a, b in itertools.combinations(v, 2):
            d3 = np.linalg.norm(geo.xyz[flat.point[a]] - geo.xyz[flat.point[b]])
            assert np.linalg.norm(flat.vertices[a] - flat.vertices[b]) == pytest.approx(d3)
    back = flat.vertices[30:]
    top_y = flat.vertices[:30, 1]
    assert back[:, 1].min() == pytest.approx(top_y.max())  # hinged on the shared edge
    assert back[:, 1].max() == pytest.approx(top_y.max() + 0.2)  # opened out, not folded over


def test_faces_without_a_shared_edge_lie_side_by_side() -> None:
    text = "face left\npoints A1 A2 B1 B2\nface right\npoints D5 D6 E5 E6\n"
    flat = unfold(parse_outline(text, GRID))
    left, right = flat.vertices[:4], flat.vertices[4:]
    assert right[:, 0].min() > left[:, 0].max()


def test_geometry_round_trips_through_json() -> None:
    geo = parse_outline(BOX, GRID)
    back = Geometry.from_dict(json.loads(json.dumps(geo.to_dict())))
    assert back.labels == geo.labels
    np.testing.assert_array_equal(back.xyz, geo.xyz)
    np.testing.assert_array_equal(back.directions, geo.directions)
    np.testing.assert_array_equal(back.lines, geo.lines)
    for a, b in zip(back.faces, geo.faces, strict=True):
        assert (a.name, a.given) == (b.name, b.given)
        np.testing.assert_array_equal(a.triangles, b.triangles)
        np.testing.assert_array_equal(a.normal, b.normal)


@pytest.mark.parametrize(
    ("text", "line", "words"),
    [
        ("face top\npoints A1 A2 Z9\n", 2, "unknown point 'Z9'"),
        ("face top\ntri A1 A2 A1\n", 2, "degenerate tri"),
        ("face top\nquad A1 A2 A3 A4\n", 2, "no area"),  # four points on one line
        ("# nothing yet\nface empty\nface top\npoints A1 A2 B1\n", 2, "has no points"),
        ("face top\npoints A1 A2 A3\n", 1, "on one line"),
        ("point Q 0 0 0.3\nface bent\npoints A1 A2 B1 B2 Q\n", 2, "not planar"),
        ("face top\nsurface A1 A2 B1\n", 2, "unknown record 'surface'"),
        ("points A1 A2 B1\n", 1, "before any face"),
        ("point Q 0 0\n", 1, "point LABEL X Y Z"),
        ("point Q 0 0 0 up\n", 1, "direction 'up'"),
        ("line A1\n", 1, "two or more points"),
        ("face a\npoints A1 A2 B1\nface a\n", 3, "already defined"),
    ],
)
def test_bad_outlines_are_refused_with_their_line(text: str, line: int, words: str) -> None:
    with pytest.raises(GeometryError) as caught:
        parse_outline(text, GRID, source="box.outline")
    message = str(caught.value)
    assert message.startswith(f"box.outline line {line}: "), message
    assert words in message


def test_a_file_without_faces_gets_the_grid_face() -> None:
    geo = parse_outline("line A1 E1\n", GRID)
    assert len(geo.faces) == 1 and len(geo.faces[0].triangles) == 40
