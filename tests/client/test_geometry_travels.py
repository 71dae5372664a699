"""Geometry travels with the test: an outline given with the grid at the rig's door (the
new-test API) is checked there, kept with the test, served with its metadata, pulled into
the mirror, and written into the npz and HDF5 exports and the modal model.

The rig is the real store and service on loopback; the pull, export and fit are the real
command line as a user runs it.
"""

from __future__ import annotations

import json
from pathlib import Path

import h5py
import numpy as np
import pytest

from taprig.client.mirror import Mirror
from taprig.client.modal import ModalModel
from taprig.client.remote import RigClient, RigError
from taprig.client.rigs import Places
from taprig.client.view.geometry import Geometry
from taprig.client.view.outline import geometry_of, parse_outline
from taprig.daemon.records import PointSet, RovingMode, StoredHit
from taprig.schema.outline import META_KEY

from .conftest import ServedRig
from .test_cli import as_json, taprig

# A box-shaped body: its top (a 3 × 2 grid at z = 0) and its back (y = 0.1, hanging down
# to z = -0.1), one edge shared; two points the outline adds; one line along the front.
GRID = [(f"{row}{col}", 0.1 * (col - 1), 0.1 * (row == "B"), 0.0)
        for row in "AB" for col in (1, 2, 3)]  # fmt: skip
OUTLINE = """# top and back of a box
point R1 0.0 0.1 -0.1 +y
point R3 0.2 0.1 -0.1 +y
face top
points A1 A2 A3 B1 B2 B3
face back
quad B1 B3 R3 R1
line A1 A2 A3
"""
ROWS = [(label, x, y, z, "+z") for label, x, y, z in GRID]


def _grid_body() -> list[dict[str, object]]:
    return [{"label": p, "x": x, "y": y, "z": z} for p, x, y, z in GRID]


MODE_HZ, ZETA = 100.0, 0.01


def _commit(served: ServedRig, test: str) -> None:
    """One point set per grid point, committed as the rig commits: the accelerance of one
    mode (MODE_HZ, ZETA, shape 1 + x/0.1 at each point, unit modal mass), struck at the
    point, measured at A1: H = −ω² φ_p φ_A1 / (ω_r² − ω² + 2iζω_rω) (Ewins, Modal
    Testing, 2000, §2.3)."""
    freq = np.arange(0.0, 500.0 + 1e-9, 0.5)
    w, wr = 2 * np.pi * freq, 2 * np.pi * MODE_HZ
    hit = StoredHit(100, "2026-01-01T00:00:00Z", True, 40.0, 8e-4, (), None)
    for label, x, *_ in GRID:
        phi = 1.0 + x / 0.1
        h = (-(w**2) * phi * 1.0 / (wr**2 - w**2 + 2j * ZETA * wr * w))[None, :]
        served.running.store.commit_point_set(PointSet(
            test=test, point=label, version=0, roving_mode=RovingMode.HAMMER,
            drive_point=label, response_labels=("acc1",), response_points=("A1",),
            n_averages=2, freq_hz=freq, h1=h, h2=h.copy(), coherence=np.ones((1, freq.size)),
            gff=np.ones(freq.size), gxx=np.abs(h) ** 2, gfx=h, hits=(hit,),
            meta={"exp_tau_s": None, "sample_rate_hz": 1024.0},
        ))  # fmt: skip


def _same(a: Geometry, b: Geometry) -> None:
    assert a.labels == b.labels
    np.testing.assert_array_equal(a.xyz, b.xyz)
    np.testing.assert_array_equal(a.directions, b.directions)
    np.testing.assert_array_equal(a.lines, b.lines)
    assert [f.name for f in a.faces] == [f.name for f in b.faces]
    for fa, fb in zip(a.faces, b.faces, strict=True):
        np.testing.assert_array_equal(fa.triangles, fb.triangles)
        np.testing.assert_allclose(fa.normal, fb.normal, atol=1e-12)


def test_the_outline_travels_rig_mirror_export_model(
    served: ServedRig, places: Places, tmp_path: Path
) -> None:
    """The outline's text comes back from the rig and the mirror unchanged; the npz and HDF5
    exports and the fitted model hold its geometry: the grid's 6 points and the 2 added,
    the top face in 4 triangles (a Delaunay triangulation of n points with h on the hull has
    2n − h − 2 triangles: 2·6 − 6 − 2 = 4; de Berg et al., Computational Geometry, 3rd ed.,
    2008, Theorem 9.1), the back's quad as its 2 triangles, the line as 2 segments."""
    with RigClient(served.url, served.token) as rig:
        made = rig.create_test("box-1", _grid_body(), outline=OUTLINE, reference="A1")
        assert made.meta[META_KEY] == OUTLINE
        assert rig.test("box-1").meta[META_KEY] == OUTLINE
    _commit(served, "box-1")
    as_json(taprig(places, "pair", f"{served.url}/pair#token={served.token}", "--json"))
    as_json(taprig(places, "pull", "--json"))
    served.service_stop()  # all that follows works from the mirror
    expected = parse_outline(OUTLINE, ROWS)
    assert len(expected.labels) == 8 and [len(f.triangles) for f in expected.faces] == [4, 2]
    assert expected.lines.shape == (2, 2)
    with Mirror.open_rig(None, places) as mirror:
        data = mirror.load("box-1")
    assert data.test_meta[META_KEY] == OUTLINE
    _same(geometry_of(data), expected)  # what `taprig view` and the pictures draw
    for fmt, name in (("npz", "box.npz"), ("hdf5", "box.h5")):
        out = tmp_path / name
        as_json(taprig(places, "export", "box-1", "--format", fmt, "--out", str(out), "--json"))
        if fmt == "npz":
            with np.load(out, allow_pickle=False) as z:
                text = str(z["geometry"])
        else:
            with h5py.File(out, "r") as f:
                text = f["geometry"][()].decode("utf-8")
        _same(Geometry.from_dict(json.loads(text)), expected)
    model_file = tmp_path / "box-model.npz"
    fitted = as_json(taprig(places, "fit", "box-1", "--band", "20:400", "--out",
                            str(model_file), "--json"))  # fmt: skip
    assert [round(m["freq_hz"], 3) for m in fitted["modes"]] == [MODE_HZ]
    got = ModalModel.load(model_file).geometry
    assert got is not None
    _same(Geometry.from_dict(got), expected)


def test_a_test_without_an_outline_exports_its_grid_as_one_face(
    served: ServedRig, places: Places, tmp_path: Path
) -> None:
    """No outline: the export's geometry is the grid's points and one face over them, the
    3 × 2 grid in 2n − h − 2 = 4 triangles (de Berg et al. 2008, Theorem 9.1)."""
    with RigClient(served.url, served.token) as rig:
        made = rig.create_test("plain-1", _grid_body())
    assert META_KEY not in made.meta
    _commit(served, "plain-1")
    as_json(taprig(places, "pair", f"{served.url}/pair#token={served.token}", "--json"))
    as_json(taprig(places, "pull", "--json"))
    out = tmp_path / "plain.npz"
    as_json(taprig(places, "export", "plain-1", "--out", str(out), "--json"))
    with np.load(out, allow_pickle=False) as z:
        geo = Geometry.from_dict(json.loads(str(z["geometry"])))
    assert geo.labels == tuple(p for p, *_ in GRID)
    assert [len(f.triangles) for f in geo.faces] == [4]


BAD = [
    ("face top\npoints A1 A2 Z9\n", 2, "unknown point 'Z9'"),
    ("face top\ntri A1 A2 A1\n", 2, "degenerate tri"),
    ("face top\nquad A1 A2 A3 B3\n", 2, "no area"),  # A1 A2 A3 on one line: no area
    ("face top\npoints A1 A2 A3\n", 1, "on one line"),
    ("# the back first\nface back\nface top\npoints A1 A2 B1\n", 2, "has no points"),
    ("face top\nsurface A1 A2 B1\n", 2, "unknown record 'surface'"),
]


@pytest.mark.parametrize(("text", "line", "words"), BAD)
def test_a_bad_outline_is_refused_at_the_door_with_its_line(
    served: ServedRig, text: str, line: int, words: str
) -> None:
    """Unknown point, degenerate face, face with no points...: 400 naming body.outline and
    the line; the test is not stored."""
    with RigClient(served.url, served.token) as rig:
        with pytest.raises(RigError) as caught:
            rig.create_test("box-bad", _grid_body(), outline=text)
        assert caught.value.status == 400
        assert caught.value.message.startswith(f"body.outline line {line}: "), caught.value
        assert words in caught.value.message
        assert "box-bad" not in {t.name for t in rig.tests()}
