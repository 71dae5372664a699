"""The simulated operator and tests whose points are not on the simulated piece.

`--sim-taps` with a `--grid` whose points the simulated piece does not have is refused
at start with a clear message (exit code 4, no traceback); a test selected later through the
service is not tapped, with a warning, and the daemon keeps serving.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

from .process import Taprigd, wait_until

BASE = ["store.min_free_mb=1", "service.bind=127.0.0.1", "service.port=0",
        "service.advertise=false", "capture.block=4096"]  # fmt: skip


def test_sim_taps_on_points_off_the_piece_are_refused_at_start(tmp_path: Path) -> None:
    grid = tmp_path / "beam.csv"
    grid.write_text("label,x,y,z\nZ1,0,0,0\nZ2,0.1,0,0\n")
    argv = [sys.executable, "-m", "taprig.daemon", "run", "--test", "beam", "--grid", str(grid),
            "--sim-taps", "0.5", "--duration", "30"]  # fmt: skip
    for item in (f"store.data_dir={tmp_path / 'rig'}", *BASE):
        argv += ["--set", item]
    done = subprocess.run(argv, capture_output=True, text=True, timeout=60)
    assert done.returncode == 4, done.stderr[-2000:]
    assert "not on the simulated piece (Z1, Z2)" in done.stderr
    assert "Traceback" not in done.stderr and "KeyError" not in done.stderr


def test_a_test_off_the_piece_selected_later_is_not_tapped(tmp_path: Path) -> None:
    data = tmp_path / "rig"
    daemon = Taprigd(data)
    daemon.argv += ["--sim-taps", "0.3"]
    daemon.start().wait_ready()
    try:
        grid = [{"label": "Z1", "x": 0.0, "y": 0.0, "z": 0.0}]
        status, body = daemon.request("POST", "/v1/tests", {"name": "beam", "grid": grid})
        assert status == 201, body
        status, body = daemon.request("POST", "/v1/session/select",
                                      {"request_id": "select-beam-1", "test": "beam"})  # fmt: skip
        assert status == 200, body
        wait_until("the warning", lambda: "Z1 of test 'beam' not on the simulated piece"
                   in daemon.log(), 20.0)  # fmt: skip
        assert daemon.get("/v1/health")["status"] == "ok"
        assert "Traceback" not in daemon.log()
    finally:
        assert daemon.stop() == 0
