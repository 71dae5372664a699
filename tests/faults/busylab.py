"""A rig in a busy lab, as processes: a device, `taprigd run`, many clients, and taps.

- The device: the simulated test piece on its own (`taprigd instrument`), a process apart as
  a real microcontroller is, on a real pseudo-terminal, 3 channels at 51.2 kHz.
- The rig: `taprigd run` reading that terminal, a roving-hammer test of the piece's 30 points
  with one average each, so every accepted tap completes a point set (16,384-sample blocks).
- The lab: `python -m tests.faults.load` with its pullers and listeners (tests/faults/load.py).
- The operator: taps the point the rig asks for, one after the other, each as soon as the
  previous tap has been counted, until the lab's time is up; when a test is complete (the rig
  disarms), the next part goes on the bench: a new test of the same grid, selected and armed.

`run_busy_lab` returns what each side counted; the fault test and the benchmark judge it.
"""

from __future__ import annotations

import contextlib
import json
import re
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from taprig.firmware_protocol.simpiece.control import ControlClient
from taprig.firmware_protocol.simpiece.modal import demo_panel
from tests.daemon.test_config import CHANNELS_3

from .attack import raise_open_file_limit
from .process import Taprigd, wait_until

ROOT = Path(__file__).resolve().parents[2]  # where `python -m tests.faults.load` is found
TAP_TIMEOUT_S = 20.0  # a tap not counted by then is lost (the rig answers within a second)


@dataclass
class BusyLab:
    """What a busy-lab run counted."""

    seconds: float
    taps: int  # taps struck
    hits: int  # hits the rig saw
    point_sets: int  # point sets the rig stored meanwhile
    link: dict[str, Any]  # the rig's link counters (samples_lost, crc_errors, ...)
    piece: dict[str, Any]  # the device's own counters (overruns, taps_lost, ...)
    lab: dict[str, Any]  # the load's tally (pulled, bytes, events, listening, errors)
    rig_log: str


def _instrument(folder: Path) -> tuple[subprocess.Popen[str], Path, int]:
    tty = folder / "tty"
    proc = subprocess.Popen(
        [sys.executable, "-m", "taprig.daemon", "instrument", "--link", str(tty), "--control", "0"],
        stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True,
    )  # fmt: skip
    assert proc.stdout is not None
    for line in proc.stdout:  # "device ...", then "control 127.0.0.1:PORT ..."
        if found := re.match(r"control 127\.0\.0\.1:(\d+)", line):
            return proc, tty, int(found.group(1))
    raise AssertionError(f"the simulated piece never said its control port (exit {proc.wait()})")


@dataclass(frozen=True)
class _Piece:
    """The simulated piece's grid as CSV text and where its two accelerometers sit."""

    grid_csv: str
    sensors: dict[str, str]  # label -> "x,y,z" in metres

    @classmethod
    def demo(cls) -> _Piece:
        model = demo_panel()

        def at(point: str) -> str:
            return ",".join(f"{float(v):.4f}" for v in model.coords[model.index(point)])

        rows = [f"{p},{at(p)}" for p in model.grid]
        return cls("label,x,y,z\n" + "\n".join(rows) + "\n",
                   {sensor: at(point) for sensor, point in model.sensors.items()})  # fmt: skip

    def next_test(self, daemon: Taprigd, name: str) -> None:
        """Create test `name` of this grid (one average a point), select and arm it."""
        sensors = {label: {"at": at, "direction": "+z"} for label, at in self.sensors.items()}
        body = {"name": name, "averages": 1, "grid_csv": self.grid_csv, "sensors": sensors}
        status, answer = daemon.request("POST", "/v1/tests", body)
        assert status == 201, answer
        for action, fields in (("select", {"test": name}), ("arm", {})):
            status, answer = daemon.request(
                "POST", f"/v1/session/{action}", {"request_id": f"{action}-{name}", **fields}
            )
            assert status == 200, answer


def _tap_once(daemon: Taprigd, control: ControlClient, piece: _Piece, tests: list[str]) -> None:
    """Tap the point the rig asks for (after a new test, if the last one is complete); return
    once the rig has counted the hit."""
    state = daemon.get("/v1/state")
    if not state["session"]["armed"]:
        tests.append(f"busy-{len(tests) + 1}")
        piece.next_test(daemon, tests[-1])
        state = daemon.get("/v1/state")
    before, point = state["hits_seen"], state["session"]["point"]
    reply = control.request("tap", point=point)
    assert reply.get("ok"), reply
    wait_until("the tap counted", lambda: daemon.get("/v1/state")["hits_seen"] > before,
               TAP_TIMEOUT_S, poll_s=0.05)  # fmt: skip


def run_busy_lab(
    folder: Path, *, seconds: float, pullers: int, listeners: int, reader: str = "process"
) -> BusyLab:
    """One run (see the module docstring); `reader` is the rig's device.reader setting."""
    raise_open_file_limit()
    device, tty, control_port = _instrument(folder)
    piece = _Piece.demo()
    config = folder / "taprigd.toml"
    config.write_text(CHANNELS_3, encoding="utf-8")
    data = folder / "rig"
    data.mkdir()
    daemon = Taprigd(data, f"device.url={tty}", f"device.reader={reader}", "capture.block=16384",
                     test=None, log_dir=folder, args=("--config", str(config)))  # fmt: skip
    daemon.argv = [a for a in daemon.argv if a not in ("--sim-control", "0")]
    lab: subprocess.Popen[str] | None = None
    try:
        daemon.start().wait_ready()
        wait_until("streaming", lambda: daemon.session()["link"]["frames_ok"] > 0, 30.0)
        tests = ["busy-1"]
        piece.next_test(daemon, tests[0])
        lab = subprocess.Popen(
            [sys.executable, "-m", "tests.faults.load", str(daemon.port), daemon.token,
             "--pullers", str(pullers), "--listeners", str(listeners), "--seconds", str(seconds)],
            stdout=subprocess.PIPE, text=True, cwd=ROOT,
        )  # fmt: skip
        taps = 0
        with ControlClient(control_port, timeout_s=10) as control:
            while lab.poll() is None:
                _tap_once(daemon, control, piece, tests)
                taps += 1
        out, _ = lab.communicate(timeout=60)

        def stored() -> int:
            return sum(len(daemon.get(f"/v1/points?test={t}")["points"]) for t in tests)

        # The last hit's point set commits a moment after the hit is counted.
        with contextlib.suppress(AssertionError):
            wait_until("the last point set", lambda: stored() >= taps, 10.0, poll_s=0.05)
        state = daemon.get("/v1/state")
        with ControlClient(control_port, timeout_s=10) as control:
            counters = control.request("state")
        return BusyLab(seconds, taps, state["hits_seen"], stored(), state["session"]["link"],
                       counters, json.loads(out.splitlines()[-1]), daemon.log())  # fmt: skip
    finally:
        if lab is not None and lab.poll() is None:
            lab.kill()
            lab.wait()
        if daemon.proc is not None and daemon.proc.poll() is None:
            daemon.stop()
        device.terminate()
        device.wait(timeout=20)
        if device.stdout is not None:
            device.stdout.close()
