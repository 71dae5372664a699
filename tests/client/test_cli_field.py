"""The client on a field session's data, as processes: partial tests called partial, and a
file the system refuses reported in one line, never a traceback."""

from __future__ import annotations

import json

import numpy as np

from taprig.client.rigs import Places

from .conftest import ServedRig, commit_synthetic
from .test_cli import as_json, taprig


def _pulled_partial(served: ServedRig, places: Places) -> None:
    commit_synthetic(served.running, "half", 5, measured=2)
    as_json(taprig(places, "pair", f"{served.url}/pair#token={served.token}", "--json"))
    as_json(taprig(places, "pull", "--json"))


def test_a_partial_test_is_called_partial(served: ServedRig, places: Places, tmp_path) -> None:
    _pulled_partial(served, places)
    out = tmp_path / "half.npz"
    text = taprig(places, "export", "half", "--out", str(out))
    assert text.returncode == 0, text.stderr
    assert "2 of 5 points of half (partial: 3 not measured)" in text.stdout
    with np.load(out, allow_pickle=False) as npz:
        meta = json.loads(str(npz["meta"]))
    assert meta["coverage"] == "2 of 5 points" and meta["unmeasured_points"] == ["P2", "P3", "P4"]
    assert meta["points_measured"] == 2 and meta["points_in_grid"] == 5
    report = taprig(places, "check", "half")
    assert report.returncode == 0, report.stderr
    assert "points (2 of 5 points)" in report.stdout
    # one coherence column per response, headed by its label, and what the figure is
    header = next(ln for ln in report.stdout.splitlines() if ln.strip().startswith("point "))
    assert "coh acc0" in header and "coh acc1" in header
    assert "coherence = its mean over the analysis band" in report.stdout
    assert "not measured yet (3): P2 P3 P4" in report.stdout
    again = next(ln for ln in report.stdout.splitlines() if "tap again:" in ln)
    assert again.split("tap again:")[1].split()[-3:] == ["P2", "P3", "P4"]
    obj = as_json(taprig(places, "check", "half", "--json"))
    assert obj["coverage"] == "2 of 5 points" and obj["tap_again"][-3:] == ["P2", "P3", "P4"]


def test_export_into_a_missing_folder_is_one_line(served: ServedRig, places: Places) -> None:
    _pulled_partial(served, places)
    bad = taprig(places, "export", "half", "--out", "/missing/dir/x.npz")
    assert bad.returncode == 1 and "Traceback" not in bad.stderr
    assert bad.stderr.strip().splitlines() == [
        "taprig: cannot write /missing/dir/x.npz: the folder /missing/dir does not exist"]
