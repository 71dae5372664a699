"""The one-command demo runs on a fresh install and stores point sets."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path


def test_demo_captures_and_writes_truth(tmp_path: Path) -> None:
    out = subprocess.run(
        [sys.executable, "-m", "taprig.client", "demo", "--out", str(tmp_path), "--seconds", "6"],
        capture_output=True, text=True, timeout=180,
    )  # fmt: skip
    assert out.returncode == 0, out.stderr
    assert "averages stored" in out.stdout
    truth = json.loads((tmp_path / "truth.json").read_text())
    assert truth["units"] == {"freq": "Hz", "shape": "kg^-1/2"}
    assert len(truth["points"]) >= 30 and truth["modes"]
    assert (tmp_path / "rig" / "taprig.sqlite3").exists()
