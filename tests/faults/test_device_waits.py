"""`taprigd run --test` as a process whose device is a real pseudo-terminal that has not
identified itself yet: the service runs meanwhile and says what the rig waits for; the test
opens and arms the moment the device says who it is."""

from __future__ import annotations

import contextlib
import json
import os
import signal
import subprocess
import sys
import time
import tty
import urllib.request
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

from taprig.firmware_protocol import FrameEncoder
from taprig.firmware_protocol.frames import ChannelInfo, DeviceInfo, SampleFormat
from tests.daemon.test_config import CHANNELS_3

LIMIT_S = 20.0


def until(what: str, check: Callable[[], Any], limit_s: float = LIMIT_S) -> Any:
    deadline = time.monotonic() + limit_s
    while not (value := check()):
        assert time.monotonic() < deadline, f"never {what} within {limit_s:g} s"
        time.sleep(0.05)
    return value


@contextlib.contextmanager
def silent_pty() -> Iterator[tuple[int, str]]:
    """A pseudo-terminal: (our master's descriptor, the device path the rig opens)."""
    master, slave = os.openpty()
    tty.setraw(slave)
    try:
        yield master, os.ttyname(slave)
    finally:
        os.close(slave)
        os.close(master)


def test_the_service_waits_with_the_rig_for_its_device(tmp_path: Path) -> None:
    config = tmp_path / "taprigd.toml"
    config.write_text(CHANNELS_3, encoding="utf-8")
    grid = tmp_path / "grid.csv"
    grid.write_text("label,x,y,z\nP1,0,0,0\nP2,0.1,0,0\n", encoding="utf-8")
    data = tmp_path / "rig"
    log = tmp_path / "taprigd.log"
    with silent_pty() as (master, device):
        with log.open("w") as err:
            proc = subprocess.Popen(
                [sys.executable, "-m", "taprig.daemon", "run", "--config", str(config),
                 "--test", "bench", "--grid", str(grid), "--set", f"device.url={device}",
                 "--sensor-at", "acc1=P1/+z", "--sensor-at", "acc2=P2/-z",
                 "--set", f"store.data_dir={data}", "--set", "store.min_free_mb=1",
                 "--set", "service.bind=127.0.0.1", "--set", "service.port=0",
                 "--set", "service.advertise=false"],
                stdout=subprocess.DEVNULL, stderr=err,
            )  # fmt: skip
        try:
            # Serving long before the 30 s the rig once waited for an answer, then gave up.
            run = until("the run file", lambda: (data / "run.json").exists() or proc.poll())
            assert run is True, log.read_text()
            port = json.loads((data / "run.json").read_text())["port"]
            token = (data / "token").read_text().strip()

            def session() -> dict[str, Any]:
                req = urllib.request.Request(f"http://127.0.0.1:{port}/v1/state")
                req.add_header("Authorization", f"Bearer {token}")
                with urllib.request.urlopen(req, timeout=5) as resp:
                    return json.loads(resp.read())["session"]  # type: ignore[no-any-return]

            s = session()
            assert s["state"] == "connected" and not s["identified"] and s["test"] is None
            assert s["device"] == device
            # The device answers at last: the test opens and arms at once.
            info = DeviceInfo(1, SampleFormat.INT16, 10_000_000, "BENCH-PTY", "0.1",
                              (ChannelInfo(5.0, 16),) * 3)  # fmt: skip
            os.write(master, FrameEncoder().info(info))
            s = until("the test opened", lambda: (s := session())["test"] == "bench" and s)
            assert s["identified"] and s["armed"] and s["point"] == "P1"
        finally:
            proc.send_signal(signal.SIGTERM)
            code = proc.wait(timeout=15)
    text = log.read_text()
    assert code == 0, text
    assert "device ready: test bench opened" in text
    assert "did not identify itself" not in text and "Traceback" not in text
