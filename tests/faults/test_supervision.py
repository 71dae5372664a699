"""taprigd under a service manager: the notify protocol on a real datagram socket, the
watchdog, and `taprigd status` beside a running and a killed daemon.

The notify messages follow sd_notify(3) and sd_watchdog_enabled(3) of systemd: READY=1 once
the service listens, STATUS= lines, WATCHDOG=1 at half of $WATCHDOG_USEC, STOPPING=1.
"""

from __future__ import annotations

import asyncio
import json
import os
import socket
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path
from types import SimpleNamespace
from typing import Any

import pytest

from taprig.daemon.notify import Notifier
from taprig.daemon.supervise import report

from .process import Taprigd, wait_until


class Manager:
    """The service manager's end: a datagram socket that collects notify messages."""

    def __init__(self, sock: socket.socket, name: str) -> None:
        self.sock, self.name = sock, name
        self.messages: list[tuple[float, str]] = []

    def receive(self, timeout: float) -> str | None:
        self.sock.settimeout(timeout)
        try:
            text = self.sock.recv(4096).decode()
        except TimeoutError:
            return None
        self.messages.append((time.monotonic(), text))
        return text

    def wait_for(self, line: str, timeout: float) -> list[str]:
        """Receive until a message holds `line`; that message's lines."""
        deadline = time.monotonic() + timeout
        while (left := deadline - time.monotonic()) > 0:
            text = self.receive(left)
            if text is not None and line in text.split("\n"):
                return text.split("\n")
        raise AssertionError(f"no {line!r} in {timeout} s; got {self.messages}")


@pytest.fixture(params=["path", "abstract"])
def manager(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[Manager]:
    sock = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM)
    if request.param == "path":
        name = str(tmp_path / "notify.sock")
        sock.bind(name)
    else:  # the abstract namespace: no file; "@" stands for the leading NUL
        name = f"@taprig-test-{os.getpid()}-{time.monotonic_ns()}"
        sock.bind("\0" + name[1:])
    try:
        yield Manager(sock, name)
    finally:
        sock.close()


def test_ready_status_watchdog_stopping(manager: Manager, tmp_path: Path) -> None:
    data = tmp_path / "rig"
    data.mkdir()
    env = {"NOTIFY_SOCKET": manager.name, "WATCHDOG_USEC": "600000"}  # pings every 0.3 s
    daemon = Taprigd(data, env=env).start()
    try:
        ready = manager.wait_for("READY=1", 60.0)
        # Ready means serving: run.json is written before READY=1.
        run = json.loads((data / "run.json").read_text())
        assert run["pid"] == daemon.pid
        status = next(x for x in ready if x.startswith("STATUS="))
        armed = "STATUS=armed, test shop at A1, device connected"
        # The service is up before the rig arms (it serves while the rig waits for its device),
        # so on a busy machine READY=1 may come with the test selected and not armed yet.
        assert status in (armed, "STATUS=idle, test shop at A1, device connected"), status
        if status != armed:
            manager.wait_for(armed, 30.0)
        t0 = time.monotonic()
        pings = 0
        while pings < 5:
            manager.wait_for("WATCHDOG=1", 2.0)
            pings += 1
        # Five pings at most 0.3 s apart (plus scheduling slack), well inside 0.6 s each.
        assert time.monotonic() - t0 < 5 * 0.3 + 1.0
        daemon.wait_ready()
        daemon.control("tap", point="A1")
        moved = manager.wait_for("STATUS=armed, test shop at A2, device connected", 5.0)
        assert moved
    finally:
        code = daemon.stop()
    assert code == 0, daemon.log()
    manager.wait_for("STOPPING=1", 5.0)


class _RigStandIn(SimpleNamespace):
    """What `report` reads of a rig; `beat` (monotonic s) is moved by the test."""


def test_watchdog_pings_stop_when_the_rig_thread_is_stuck(manager: Manager) -> None:
    notify = Notifier({"NOTIFY_SOCKET": manager.name, "WATCHDOG_USEC": "200000"})
    view = SimpleNamespace(waiting_for_room=False, armed=False, plan=None, point=None,
                           link_state=SimpleNamespace(value="connected"))  # fmt: skip
    rig: Any = _RigStandIn(beat=time.monotonic(), view=lambda: view)

    async def run_for(seconds: float) -> None:
        task = asyncio.create_task(report(rig, notify))
        await asyncio.sleep(seconds)
        task.cancel()
        with pytest.raises(asyncio.CancelledError):
            await task

    async def alive() -> None:
        while True:
            rig.beat = time.monotonic()
            await asyncio.sleep(0.01)

    async def healthy_then_stuck() -> None:
        beating = asyncio.create_task(alive())
        await run_for(0.5)
        beating.cancel()
        with pytest.raises(asyncio.CancelledError):
            await beating

    asyncio.run(healthy_then_stuck())
    got = []
    while (text := manager.receive(0.05)) is not None:
        got.append(text)
    assert got.count("WATCHDOG=1") >= 3
    rig.beat = time.monotonic() - 10.0  # stuck
    manager.messages.clear()
    asyncio.run(run_for(0.5))
    while manager.receive(0.05) is not None:
        pass
    assert all("WATCHDOG=1" not in m for _, m in manager.messages), manager.messages
    notify.close()


def test_watchdog_for_another_process_is_ignored() -> None:
    env = {"NOTIFY_SOCKET": "@x", "WATCHDOG_USEC": "1000000", "WATCHDOG_PID": "1"}
    assert Notifier(env).watchdog_s is None
    env["WATCHDOG_PID"] = str(os.getpid())
    assert Notifier(env).watchdog_s == 0.5
    assert not Notifier({}).active  # no socket: every call does nothing
    Notifier({}).ready("idle")  # and opens nothing


def status(data: Path, *extra: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "taprig.daemon", "status", "--set", f"store.data_dir={data}",
         "--set", "store.min_free_mb=1", *extra],
        capture_output=True, text=True, timeout=60,
    )  # fmt: skip


def test_status_running_then_killed(tmp_path: Path) -> None:
    data = tmp_path / "rig"
    data.mkdir()
    out = status(data)
    assert out.returncode == 1 and "not running (no run file)" in out.stdout
    daemon = Taprigd(data).start().wait_ready()
    try:
        daemon.control("tap", point="A1")
        wait_until("stored", lambda: daemon.get("/v1/points")["points"], 5.0)
        out = status(data)
        assert out.returncode == 0, out.stderr
        text = out.stdout
        assert f"running, pid {daemon.pid}" in text
        assert f"{data}/sim-tty: connected, 51200 Hz" in text
        assert "link errors CRC 0, resyncs 0" in text
        assert "test        shop, point A2 (0/1 averages), 1 point done, armed" in text
        assert "1 test, 1 point set, last change 2" in text  # plurals right
        assert "MB needed to arm" in text
        summary = json.loads(status(data, "--json").stdout)
        assert summary["running"] and summary["state"]["session"]["test"] == "shop"
        assert summary["store"]["point_sets"] == 1 and summary["free_mb"] > 1
        daemon.kill9()
        out = status(data)
        assert out.returncode == 1
        assert f"not running (stale run file of pid {daemon.pid})" in out.stdout
        assert "1 point set," in out.stdout  # the store is still read
    finally:
        if daemon.proc is not None and daemon.proc.poll() is None:
            daemon.stop()


def test_log_lines_carry_their_level_for_the_journal(tmp_path: Path) -> None:
    """With stderr on the journal ($JOURNAL_STREAM names its device:inode), each line starts
    with its syslog priority, <6> info and <4> warning (sd-daemon(3), RFC 5424 §6.2.1)."""
    data = tmp_path / "rig"
    data.mkdir()
    log = tmp_path / "rig.log"
    log.touch()
    st = log.stat()
    daemon = Taprigd(data, env={"JOURNAL_STREAM": f"{st.st_dev}:{st.st_ino}"}).start()
    try:
        daemon.wait_ready()
    finally:
        assert daemon.stop() == 0
    lines = [x for x in daemon.log().splitlines() if x]
    assert lines and all(x[:3] in ("<6>", "<4>", "<3>", "<7>") for x in lines), lines[:5]
    # averages = 1 draws a warning about single-average coherence at selection
    assert any(x.startswith("<4>WARNING taprig.daemon.rig: test shop:") for x in lines)
    assert any(x.startswith("<6>INFO ") for x in lines)
