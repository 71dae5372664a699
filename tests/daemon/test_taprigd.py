"""`taprigd run` as an operator starts it: a process that captures, serves and stops cleanly."""

from __future__ import annotations

import json
import re
import signal
import subprocess
import sys
import time
import urllib.error
import urllib.request
from pathlib import Path


def get(url: str, token: str | None = None) -> tuple[int, dict[str, object]]:
    req = urllib.request.Request(url)
    if token is not None:
        req.add_header("Authorization", f"Bearer {token}")
    try:
        with urllib.request.urlopen(req, timeout=5) as resp:
            return resp.status, json.loads(resp.read())
    except urllib.error.HTTPError as exc:
        return exc.code, json.loads(exc.read())


def test_run_serves_on_loopback_and_stops_on_sigterm(tmp_path: Path) -> None:
    log = tmp_path / "taprigd.log"
    with log.open("w") as err:
        proc = subprocess.Popen(
            [sys.executable, "-m", "taprig.daemon", "run", "--set", f"store.data_dir={tmp_path}",
             "--set", "store.min_free_mb=1", "--set", "service.bind=127.0.0.1",
             "--set", "service.port=0", "--set", "service.advertise=false", "--test", "shop-1"],
            stdout=subprocess.DEVNULL, stderr=err,
        )  # fmt: skip
    try:
        deadline = time.monotonic() + 30
        while not (m := re.search(r"service on (http://127\.0\.0\.1:\d+)/v1", log.read_text())):
            assert proc.poll() is None, log.read_text()
            assert time.monotonic() < deadline, "the service never came up"
            time.sleep(0.05)
        base = m.group(1)
        status, info = get(f"{base}/v1/info")
        assert status == 200 and info["rig"] == "taprig"
        assert get(f"{base}/v1/state")[0] == 401
        token = (tmp_path / "token").read_text().strip()
        status, state = get(f"{base}/v1/state", token)
        assert status == 200
        session = state["session"]
        assert isinstance(session, dict) and session["test"] == "shop-1" and session["armed"]
        assert token not in log.read_text()
    finally:
        proc.send_signal(signal.SIGTERM)
        code = proc.wait(timeout=15)
    assert code == 0, log.read_text()
    assert "Traceback" not in log.read_text()


def test_run_file_names_the_port_and_the_virtual_control(tmp_path: Path) -> None:
    """run.json appears while serving (port and control port), and goes when taprigd stops."""
    from taprig.firmware_protocol.virtual.control import ControlClient

    log = tmp_path / "taprigd.log"
    with log.open("w") as err:
        proc = subprocess.Popen(
            [sys.executable, "-m", "taprig.daemon", "run", "--set", f"store.data_dir={tmp_path}",
             "--set", "store.min_free_mb=1", "--set", "service.bind=127.0.0.1",
             "--set", "service.port=0", "--set", "service.advertise=false", "--test", "shop-2",
             "--virtual-control", "0"],
            stdout=subprocess.DEVNULL, stderr=err,
        )  # fmt: skip
    run_file = tmp_path / "run.json"
    try:
        deadline = time.monotonic() + 30
        while not run_file.exists():
            assert proc.poll() is None, log.read_text()
            assert time.monotonic() < deadline, "run.json never appeared"
            time.sleep(0.05)
        record = json.loads(run_file.read_text())
        assert record["pid"] == proc.pid and record["bind"] == "127.0.0.1"
        assert get(f"http://127.0.0.1:{record['port']}/v1/info")[0] == 200
        with ControlClient(record["control_port"], timeout_s=5) as control:
            reply = control.request("state")
        assert reply["ok"] is True
    finally:
        proc.send_signal(signal.SIGTERM)
        code = proc.wait(timeout=15)
    assert code == 0
    assert not run_file.exists()


def pair_output(data_dir: Path, *args: str) -> str:
    done = subprocess.run(
        [sys.executable, "-m", "taprig.daemon", "pair", "--set", f"store.data_dir={data_dir}",
         *args],
        capture_output=True, text=True, timeout=60,
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    assert "Traceback" not in done.stderr
    return done.stdout


def test_pair_prints_where_the_running_daemon_listens(tmp_path: Path) -> None:
    """`taprigd pair` reads the run file: the port the daemon really bound (not the configured
    8470) and, for a daemon bound to loopback, the loopback address, with a word on why."""
    log = tmp_path / "taprigd.log"
    with log.open("w") as err:
        proc = subprocess.Popen(
            [sys.executable, "-m", "taprig.daemon", "run", "--set", f"store.data_dir={tmp_path}",
             "--set", "store.min_free_mb=1", "--set", "service.bind=127.0.0.1",
             "--set", "service.port=0", "--set", "service.advertise=false"],
            stdout=subprocess.DEVNULL, stderr=err,
        )  # fmt: skip
    run_file = tmp_path / "run.json"
    try:
        deadline = time.monotonic() + 30
        while not run_file.exists():
            assert proc.poll() is None, log.read_text()
            assert time.monotonic() < deadline, "run.json never appeared"
            time.sleep(0.05)
        port = json.loads(run_file.read_text())["port"]
        assert port != 8470
        # The configuration pair reads says 8470 and every address; the run file wins.
        out = pair_output(tmp_path, "--set", "service.port=8470", "--set", "service.bind=0.0.0.0")
        token = (tmp_path / "token").read_text().strip()
        assert f"  http://127.0.0.1:{port}/pair#token={token}\n" in out
        assert "loopback only" in out
        # The printed address works: the page is served there.
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/pair", timeout=5) as resp:
            assert resp.status == 200
    finally:
        proc.send_signal(signal.SIGTERM)
        code = proc.wait(timeout=15)
    assert code == 0, log.read_text()
    # Without a running daemon: the configured port, and a note that it is not running.
    out = pair_output(tmp_path, "--set", "service.port=8471", "--set", "service.bind=127.0.0.1")
    assert ":8471/pair#token=" in out and "not running" in out
