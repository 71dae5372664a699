"""`taprig fit` as a user runs it: a real process reading the mirror of a real rig service.

The test on the rig is the known model of tests/client/modal/synthetic.py (its exact FRFs
committed through the rig's store as point sets, pulled over loopback HTTP into the
mirror), so the expected modes are the model's own (Ewins, Modal Testing, 2000, §2.3).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from taprig.client import dataset
from taprig.client.modal import ModalModel
from taprig.client.rigs import Places
from taprig.daemon.records import GridPoint, PointSet, RovingMode, StoredHit
from taprig.daemon.running import RunningRig

from ..conftest import ServedRig
from ..test_cli import as_json, taprig
from .synthetic import FREQ_HZ, known_data


def commit_test(running: RunningRig, name: str, data: dataset.TestData) -> None:
    """Every row of `data` as a completed point set of test `name` on the rig."""
    grid = [GridPoint(p, *map(float, c)) for p, c in zip(data.points, data.coords, strict=True)]
    sensors = dict(zip(data.responses, data.response_points[0], strict=True))
    running.store.save_test(name, grid, RovingMode.HAMMER, data.reference, 1,
                            {"sensor_points": sensors})  # fmt: skip
    hit = StoredHit(100, "2026-01-01T00:00:00Z", True, 40.0, 8e-4, (), None)
    for i, point in enumerate(data.points):
        running.store.commit_point_set(PointSet(
            test=name, point=point, version=0, roving_mode=RovingMode.HAMMER,
            drive_point=point, response_labels=data.responses,
            response_points=data.response_points[i], n_averages=int(data.n_averages[i]),
            freq_hz=data.freq_hz, h1=data.h1[i], h2=data.h2[i], coherence=data.coherence[i],
            gff=data.gff[i], gxx=data.gxx[i], gfx=data.h1[i] * data.gff[i], hits=(hit,),
            meta={"exp_tau_s": data.exp_tau_s, "sample_rate_hz": 2000.0},
        ))  # fmt: skip


@pytest.fixture
def mirrored(served: ServedRig, places: Places) -> Places:
    _, data = known_data(0.5)
    commit_test(served.running, "beam", data)
    as_json(taprig(places, "pair", f"{served.url}/pair#token={served.token}", "--json"))
    as_json(taprig(places, "pull", "--json"))
    served.service_stop()  # the fit works offline
    return places


def test_fit_prints_writes_and_draws(mirrored: Places, tmp_path: Path) -> None:
    """The six modes of the model, as JSON, as a file (npz and HDF5 read back the same) and
    as a table; plots drawn (the stabilization diagram, auto-MAC, one FRF per point, a GIF
    per mode and their sheet)."""
    npz = tmp_path / "beam.npz"
    report = as_json(taprig(mirrored, "fit", "beam", "--band", "20:800", "--out", str(npz),
                            "--plots", str(tmp_path / "plots"), "--json"))  # fmt: skip
    freqs = [m["freq_hz"] for m in report["modes"]]
    assert np.allclose(freqs, FREQ_HZ, rtol=1e-6)
    assert set(report["modes"][0]) >= {"freq_hz", "damping_ratio", "damping_ratio_windowed",
                                       "mpc", "synthesis_error", "flags"}  # fmt: skip
    assert report["meta"]["driving_point"] == "G3 (acc1)"
    model = ModalModel.load(npz)
    assert np.allclose(model.freq_hz, freqs) and model.shape.shape == (6, 12)
    names = sorted(p.name for p in (tmp_path / "plots").iterdir())
    gifs = [n for n in names if n.endswith(".gif")]
    pngs = [n for n in names if n.endswith(".png") and n != "modes-sheet.png"]
    assert pngs[:2] == ["auto-mac.png", "stabilization.png"] and len(pngs) == 14
    assert len(gifs) == 6 and "modes-sheet.png" in names  # each mode moving, and all
    h5 = tmp_path / "beam.h5"
    as_json(taprig(mirrored, "fit", "beam", "--band", "20:800", "--out", str(h5), "--json"))
    again = ModalModel.load(h5)
    assert again.point == model.point and again.flags == model.flags
    assert np.allclose(again.shape, model.shape) and again.meta == model.meta
    text = taprig(mirrored, "fit", "beam", "--band", "20:800", "--pick", "120,250")
    assert text.returncode == 0, text.stderr
    assert "2 modes of beam" in text.stdout and "unit modal mass" in text.stdout


BAD = [
    (("no-such-test",), 3, "no test 'no-such-test'"),
    (("beam", "--orders", "30:10"), 2, "--orders '30:10'"),
    (("beam", "--pick", "abc"), 2, "--pick 'abc'"),
    (("beam", "--band", "850:990"), 4, "no stable mode in 850:990 Hz"),
    (("beam", "--band", "100:110", "--orders", "4:60"), 4, "need at least 122 lines"),
    (("beam", "--out", "/nonexistent/dir/m.npz", "--band", "20:800"), 2, "m.npz"),
]


def test_bad_requests_get_one_line_and_an_exit_code(mirrored: Places) -> None:
    """An unknown test (the mirror's MirrorError, exit 3), bad options (2), a band with no
    modes and orders beyond the band's lines (FitError, 4), an unwritable file (2)."""
    for args, code, words in BAD:
        out = taprig(mirrored, "fit", *args)
        assert out.returncode == code, (args, out.stdout, out.stderr)
        assert words in out.stderr and "Traceback" not in out.stderr, (args, out.stderr)
        assert out.stderr.count("\n") == 1, out.stderr


def test_python_api_as_the_readme_shows_it(mirrored: Places, tmp_path: Path) -> None:
    """`from taprig.client import Mirror, fit`; fit(mirror.load(test)); save; load back.
    Expected frequencies: the known model's (tests/client/modal/synthetic.py)."""
    from taprig.client import Mirror, fit

    with Mirror.open_rig(None, mirrored) as mirror:
        model = fit(mirror.load("beam"), band=(20, 800))
    assert np.allclose(model.freq_hz, FREQ_HZ, rtol=1e-6) and len(model.flags) == 6
    path = model.save(str(tmp_path / "modes.npz"))
    assert np.array_equal(ModalModel.load(path).shape, model.shape)
