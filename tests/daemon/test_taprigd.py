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


def start(tmp_path: Path, *args: str) -> tuple[subprocess.Popen[bytes], Path]:
    """`taprigd run` on the simulated device, serving on a free loopback port, data and log in
    `tmp_path`, with `args` added; the process and its log file."""
    log = tmp_path / "taprigd.log"
    with log.open("w") as err:
        proc = subprocess.Popen(
            [sys.executable, "-m", "taprig.daemon", "run", "--set", f"store.data_dir={tmp_path}",
             "--set", "store.min_free_mb=1", "--set", "service.bind=127.0.0.1",
             "--set", "service.port=0", "--set", "service.advertise=false", *args],
            stdout=subprocess.DEVNULL, stderr=err,
        )  # fmt: skip
    return proc, log


def served_at(proc: subprocess.Popen[bytes], log: Path) -> str:
    """The service's base URL once its log names it (the process must stay up meanwhile)."""
    deadline = time.monotonic() + 30
    while not (m := re.search(r"service on (http://127\.0\.0\.1:\d+)/v1", log.read_text())):
        assert proc.poll() is None, log.read_text()
        assert time.monotonic() < deadline, "the service never came up"
        time.sleep(0.05)
    return m.group(1)


def wait_for_run_file(proc: subprocess.Popen[bytes], log: Path, run_file: Path) -> None:
    """Poll (deadline 30 s) until taprigd has written its run file; fail if it exits first."""
    deadline = time.monotonic() + 30
    while not run_file.exists():
        assert proc.poll() is None, log.read_text()
        assert time.monotonic() < deadline, "run.json never appeared"
        time.sleep(0.05)


def test_run_serves_on_loopback_and_stops_on_sigterm(tmp_path: Path) -> None:
    proc, log = start(tmp_path, "--test", "shop-1")
    try:
        base = served_at(proc, log)
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


def test_run_file_names_the_port_and_the_sim_control(tmp_path: Path) -> None:
    """run.json appears while serving (port and control port), and goes when taprigd stops."""
    from taprig.firmware_protocol.simpiece.control import ControlClient

    proc, log = start(tmp_path, "--test", "shop-2", "--sim-control", "0")
    run_file = tmp_path / "run.json"
    try:
        wait_for_run_file(proc, log, run_file)
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
        wait_for_run_file(proc, log, run_file)
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


BOX_CSV = "label,x,y,z\nA1,0,0,0\nA2,0.1,0,0\nB1,0,0.1,0\nB2,0.1,0.1,0\n"
BOX_OUTLINE = "face top\nquad A1 A2 B2 B1\nline A1 B2\n"


def _run_box(tmp_path: Path, outline: str) -> tuple[subprocess.Popen[bytes], Path]:
    """`taprigd run --test box --grid box.csv` with `outline` in box.outline beside it."""
    (tmp_path / "box.csv").write_text(BOX_CSV)
    (tmp_path / "box.outline").write_text(outline)
    return start(tmp_path, "--test", "box", "--grid", str(tmp_path / "box.csv"))


def test_run_keeps_the_outline_beside_the_grid_with_the_new_test(tmp_path: Path) -> None:
    """box.outline beside box.csv is the new test's outline: served with the test."""
    proc, log = _run_box(tmp_path, BOX_OUTLINE)
    try:
        base = served_at(proc, log)
        token = (tmp_path / "token").read_text().strip()
        status, test = get(f"{base}/v1/tests/box", token)
        assert status == 200
        meta = test["meta"]
        assert isinstance(meta, dict) and meta["outline"] == BOX_OUTLINE
    finally:
        proc.send_signal(signal.SIGTERM)
        code = proc.wait(timeout=15)
    assert code == 0, log.read_text()


def test_run_refuses_a_bad_outline_with_its_line(tmp_path: Path) -> None:
    """An outline naming a point the grid lacks: exit 2, one line naming the file and line."""
    proc, log = _run_box(tmp_path, "face top\nquad A1 A2 B2 C9\n")
    try:
        code = proc.wait(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    text = log.read_text()
    assert code == 2, text
    assert f"{tmp_path / 'box.outline'} line 2: unknown point 'C9'" in text
    assert "Traceback" not in text
