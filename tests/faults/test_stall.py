"""A host too busy to run: taprigd frozen (SIGSTOP) for seconds while a tap is struck.

On a loaded machine the whole daemon process can be descheduled for a second or more. The
simulated test piece lives in that process, so it falls behind real time too; it must then
catch up without dropping samples (its FIFO waits for the host instead of overflowing while
it catches up), and the tap struck during the freeze must come out as exactly one counted hit
with no sample lost. A tap that vanished here is what once made a CI run red.
"""

from __future__ import annotations

import os
import signal
import threading
from pathlib import Path

from taprig.firmware_protocol.simpiece.control import ControlClient

from .process import Taprigd, wait_until

FREEZES_S = (1.5, 3.0)  # both longer than the device buffer holds (0.57 s at 51.2 kHz × 3)


def test_a_tap_struck_while_the_host_is_frozen_is_counted_once(tmp_path: Path) -> None:
    data = tmp_path / "rig"
    data.mkdir()
    daemon = Taprigd(data, "capture.averages=5").start().wait_ready()
    try:
        wait_until("streaming", lambda: daemon.session()["link"]["frames_ok"] > 0, 10.0)
        for k, freeze_s in enumerate(FREEZES_S, start=1):
            frozen_tap(daemon, freeze_s)
            wait_until(f"hit {k}", lambda k=k: daemon.get("/v1/state")["hits_seen"] >= k, 20.0)
            session = daemon.session()
            assert session["averages"] == k, session
            assert session["link"]["samples_lost"] == 0, session["link"]
        assert daemon.control("state")["taps_lost"] == 0
    finally:
        code = daemon.stop()
    assert code == 0, daemon.log()
    assert "Traceback" not in daemon.log()


def frozen_tap(daemon: Taprigd, freeze_s: float) -> None:
    """Freeze the daemon, ask for a tap while it is frozen, and let it run again.

    The freeze's length is the scenario itself (how long the host is away), not a wait for
    something to happen; the tap's request waits in the control socket's backlog meanwhile.
    """
    reply: dict[str, object] = {}
    os.kill(daemon.pid, signal.SIGSTOP)
    try:
        asker = threading.Thread(target=lambda: reply.update(tap(daemon.control_port)))
        asker.start()
        threading.Event().wait(freeze_s)
    finally:
        os.kill(daemon.pid, signal.SIGCONT)
    asker.join(timeout=30.0)
    assert not asker.is_alive() and reply.get("ok"), reply


def tap(port: int) -> dict[str, object]:
    with ControlClient(port, timeout_s=30.0) as control:
        return control.request("tap", point="A1")
