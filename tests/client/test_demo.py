"""`taprig demo` as a newcomer runs it: one command, the whole job, everything stopped after.

The quick mode table is held to the demo's own truth file (the simulated panel's modal model,
written by taprigd): natural frequencies within 1 %, Q within 10 % after the window
correction, and deflection shapes with MAC above 0.95 (Allemang and Brown, "A correlation
coefficient for modal vector analysis", 1982), for every mode the stated rule of
`judged_modes` (tests/client/test_check.py) says the data can show.
"""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from taprig.client import dataset
from taprig.client.check import check
from taprig.client.mirror import Mirror
from taprig.client.modal import ModalModel
from taprig.client.view.pictures import FRAMES
from taprig.firmware_protocol.simpiece import load_truth

from .test_check import assert_modes_match, judged_modes


def _processes_mentioning(text: str) -> list[int]:
    found = []
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit() and int(entry.name) != os.getpid():
            try:
                cmdline = (entry / "cmdline").read_bytes().replace(b"\0", b" ").decode()
            except OSError:
                continue
            if text in cmdline:
                found.append(int(entry.name))
    return found


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, str]:
    out = tmp_path_factory.mktemp("demo")
    run = subprocess.run([sys.executable, "-m", "taprig.client", "demo", "--out", str(out)],
                         capture_output=True, text=True, timeout=300)  # fmt: skip
    assert run.returncode == 0, run.stdout + run.stderr
    return out, run.stdout


@pytest.mark.slow
def test_demo_runs_the_whole_job_and_stops_what_it_started(demo: tuple[Path, str]) -> None:
    out, stdout = demo
    assert "tap rejected by the rig: double hit" in stdout
    assert "measured again" in stdout and "verified by checksum" in stdout
    assert "6 times faster than real time" in stdout  # the sped-up panel is stated
    log = (out / "taprigd.log").read_text()
    state_dirs = {w for w in log.split() if "taprig-demo-rig-" in w}
    assert "Traceback" not in log
    # This demo's own state folders only: another suite on the machine may run a demo too.
    names = set(re.findall(r"taprig-demo-rig-[A-Za-z0-9_]+", log))
    assert names and not any(_processes_mentioning(n) for n in names), "taprigd still runs"
    assert not any(Path(d.rstrip(":,")).exists() for d in state_dirs if d.startswith("/"))
    truth = json.loads((out / "truth.json").read_text())
    assert truth["units"] == {"freq": "Hz", "shape": "kg^-1/2"} and len(truth["points"]) >= 30
    report = (out / "check.txt").read_text()
    assert "modes (" in report and "driving points" in report
    pngs = sorted((out / "plots").glob("*.png"))
    assert len(pngs) > 30 and all(p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" for p in pngs)
    # The modes moving: one GIF a fitted mode, one cycle each, and the sheet of them all.
    gifs = sorted((out / "plots").glob("mode-*.gif"))
    assert len(gifs) >= 5 and (out / "plots" / "modes-sheet.png").is_file()
    for gif in gifs:
        with Image.open(gif) as image:
            assert image.format == "GIF" and image.n_frames == FRAMES


@pytest.mark.slow
def test_demo_export_is_the_mirror_and_its_modes_are_the_truth(demo: tuple[Path, str]) -> None:
    out, _ = demo
    with Mirror(out / "mirror" / "demo-rig.sqlite3") as mirror:
        data: dataset.TestData = mirror.load("demo-panel")
        versions = {s.point: s.version for s in mirror.summaries("demo-panel")}
    truth = load_truth(out / "truth.json")
    assert data.points == tuple(truth.grid) and max(versions.values()) == 1
    assert len(mirror_rows := data.point_set_ids) == len(truth.grid) and mirror_rows
    with np.load(out / "demo-panel.npz", allow_pickle=False) as npz:
        assert npz["H1"].tobytes() == data.h1.tobytes()
        assert npz["coherence"].tobytes() == data.coherence.tobytes()
        assert list(npz["point"]) == list(data.points)
        assert np.array_equal(npz["coord"], data.coords) and npz["exp_tau_s"] == data.exp_tau_s
        meta = json.loads(str(npz["meta"]))
    assert meta["rig"] == "demo-rig" and meta["test"] == "demo-panel"
    # Where the sensors really sit travels with the data: acc1 on B3, acc2 off the grid.
    assert meta["reference"] == "B3" and meta["sensors"]["acc1"]["point"] == "B3"
    assert meta["sensors"]["acc2"]["point"] is None and meta["sensors_missing"] == []
    assert meta["sensors"]["acc2"]["xyz"] == pytest.approx(truth.coords[truth.index("X1")])
    assert "sigma_true = sigma_measured - 1/exp_tau_s" in meta["exponential_window"]
    # Rejected double hits reach the workstation with their reason.
    assert sum(r.get("double_hit", 0) for r in data.rejections) >= 1
    result = check(data)
    judged = judged_modes(truth, data, result.band_hz)
    assert len(judged) >= 5, judged
    assert_modes_match(result, truth, judged)
    (dp,) = result.driving_points
    assert dp.ok


@pytest.mark.slow
def test_demo_fits_the_modes_and_prints_them_beside_the_truth(demo: tuple[Path, str]) -> None:
    """modes.npz holds at least 26 of the 27 modes in the band, every one within 0.1 % of a
    true natural frequency (the panel's truth: a simply supported plate, Leissa, Vibration
    of Plates, NASA SP-160, 1969), and the table beside the truth is printed."""
    out, stdout = demo
    model = ModalModel.load(out / "modes.npz")
    truth = load_truth(out / "truth.json")
    nearest = np.min(np.abs(model.freq_hz[:, None] / truth.freqs_hz[None, :] - 1.0), axis=1)
    assert model.n_modes >= 26 and np.all(nearest <= 1e-3), model.freq_hz
    assert "modes fitted (pLSCF + LSFD) beside the panel's truth:" in stdout
    assert "true f  fitted f" in stdout
