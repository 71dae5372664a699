"""`taprigd run` as a real process for the fault suite: start, wait, ask, tap, kill.

The daemon captures from its simulated test piece (a real pseudo-terminal behind the stable
name `<data_dir>/sim-tty`), serves /v1 on an ephemeral loopback port and serves the
instrument's control port; both ports come from `<data_dir>/run.json`.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
import urllib.error
import urllib.request
from pathlib import Path
from typing import Any

from taprig.daemon.store import Store
from taprig.firmware_protocol.simpiece.control import ControlClient

START_TIMEOUT_S = 60.0


class Taprigd:
    """One `taprigd run` process on `data_dir`; `settings` are extra section.key=value.

    Its log (stderr) goes to `<log_dir>/<data_dir name>.log` (default: beside data_dir).
    test: selected and armed at start (`--test`); None starts as systemd does, without one.
    args: more command-line arguments (e.g. ``--grid FILE``).
    """

    def __init__(
        self,
        data_dir: Path,
        *settings: str,
        test: str | None = "shop",
        env: dict[str, str] | None = None,
        log_dir: Path | None = None,
        args: tuple[str, ...] = (),
    ) -> None:
        self.data_dir = data_dir
        self.log_path = (log_dir or data_dir.parent) / f"{data_dir.name}.log"
        base = [f"store.data_dir={data_dir}", "store.min_free_mb=1", "service.bind=127.0.0.1",
                "service.port=0", "service.advertise=false", "capture.block=4096",
                "capture.averages=1"]  # fmt: skip
        argv = [sys.executable, "-m", "taprig.daemon", "run", "--sim-control", "0"]
        if test is not None:
            argv += ["--test", test]
        argv += args
        for item in (*base, *settings):
            argv += ["--set", item]
        self.argv = argv
        self.env = env
        self.proc: subprocess.Popen[bytes] | None = None
        self.port = self.control_port = 0
        self.token = ""

    def start(self) -> Taprigd:
        with self.log_path.open("a") as log:
            self.proc = subprocess.Popen(
                self.argv, stdout=subprocess.DEVNULL, stderr=log,
                env={**os.environ, **(self.env or {})},
            )  # fmt: skip
        return self

    def wait_ready(self, timeout: float = START_TIMEOUT_S) -> Taprigd:
        """Until run.json names this process (the service listens and the test is armed)."""
        assert self.proc is not None
        run_file = self.data_dir / "run.json"
        deadline = time.monotonic() + timeout
        while True:
            assert self.proc.poll() is None, f"taprigd exited:\n{self.log()}"
            assert time.monotonic() < deadline, f"taprigd never came up:\n{self.log()}"
            try:
                record = json.loads(run_file.read_text())
            except (FileNotFoundError, ValueError):
                record = {}
            if record.get("pid") == self.proc.pid:
                break
            time.sleep(0.02)
        self.port, self.control_port = record["port"], record["control_port"]
        self.token = (self.data_dir / "token").read_text().strip()
        return self

    def log(self) -> str:
        return self.log_path.read_text(errors="replace") if self.log_path.exists() else ""

    @property
    def pid(self) -> int:
        assert self.proc is not None
        return self.proc.pid

    # --- the HTTP service -------------------------------------------------------

    def request(self, method: str, path: str, body: Any = None) -> tuple[int, Any]:
        data = None if body is None else json.dumps(body).encode()
        req = urllib.request.Request(f"http://127.0.0.1:{self.port}{path}", data, method=method)
        req.add_header("Authorization", f"Bearer {self.token}")
        if data is not None:
            req.add_header("Content-Type", "application/json")
        try:
            with urllib.request.urlopen(req, timeout=10) as resp:
                return resp.status, json.loads(resp.read())
        except urllib.error.HTTPError as exc:
            return exc.code, json.loads(exc.read())

    def get(self, path: str) -> Any:
        status, obj = self.request("GET", path)
        assert status == 200, (path, status, obj)
        return obj

    def session(self) -> dict[str, Any]:
        state: dict[str, Any] = self.get("/v1/state")["session"]
        return state

    # --- the simulated test piece's control port -----------------------------------

    def control(self, op: str, **fields: Any) -> dict[str, Any]:
        with ControlClient(self.control_port, timeout_s=5) as control:
            reply = control.request(op, **fields)
        assert reply.get("ok"), reply
        return reply

    # --- ending -------------------------------------------------------------------

    def kill9(self) -> None:
        assert self.proc is not None
        self.proc.send_signal(signal.SIGKILL)
        self.proc.wait(timeout=10)

    def stop(self, timeout: float = 20.0) -> int:
        """SIGTERM and wait; the exit code (0 for a clean stop)."""
        assert self.proc is not None
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGTERM)
        try:
            return self.proc.wait(timeout=timeout)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait(timeout=10)
            raise

    def rss_kb(self) -> int:
        """The process's resident set size now (VmRSS of /proc/PID/status), KiB."""
        for line in Path(f"/proc/{self.pid}/status").read_text().splitlines():
            if line.startswith("VmRSS:"):
                return int(line.split()[1])
        raise AssertionError("no VmRSS line")


def wait_until(what: str, condition: Any, timeout: float, poll_s: float = 0.02) -> Any:
    """Poll `condition()` until it returns something true; fail with `what` at the deadline."""
    deadline = time.monotonic() + timeout
    while True:
        value = condition()
        if value:
            return value
        assert time.monotonic() < deadline, f"timed out waiting for {what}"
        time.sleep(poll_s)


def tap_until_hit(daemon: Taprigd, tries: int = 10, timeout: float = 20.0) -> dict[str, Any]:
    """Tap until the rig records a hit (with frames dropping, the pulse itself may be lost
    and a tap go unseen); that hit's verdict. A tap every 0.4 s, at most `tries` of them;
    a busy machine may leave the rig behind the device, so the hit of an earlier tap is
    waited for until `timeout` after the first."""
    seen = daemon.get("/v1/state")["hits_seen"]
    deadline = time.monotonic() + timeout
    taps, next_tap = 0, 0.0
    while time.monotonic() < deadline:
        if taps < tries and time.monotonic() >= next_tap:
            daemon.control("tap", point="A1")
            taps, next_tap = taps + 1, time.monotonic() + 0.4
        if daemon.get("/v1/state")["hits_seen"] > seen:
            hit: dict[str, Any] = daemon.get("/v1/hits/last")
            return hit
        time.sleep(0.02)
    raise AssertionError(f"no hit recorded in {taps} taps and {timeout:g} s")


def tap_until_accepted(daemon: Taprigd, tries: int = 10) -> dict[str, Any]:
    """Tap until a hit is accepted; that hit's verdict."""
    for _ in range(tries):
        hit = tap_until_hit(daemon)
        if hit["accepted"]:
            return hit
    raise AssertionError(f"no hit accepted in {tries} taps")


def check_store(data_dir: Path, seen_ids: set[int]) -> int:
    """Open the store the way a restarted daemon does and check it whole; the point sets in it.

    integrity_check passes; every point set a client had seen is there; every point set is
    complete: all its accepted hits, decodable arrays, and a wire body matching its digest.
    """
    from taprig.daemon.wirebody import encode_body
    from taprig.schema import records
    from taprig.schema.http import content_digest

    with Store(data_dir, body_encoder=encode_body) as store:
        assert store.integrity_check() == "ok"
        summaries = store.list_point_sets()
        ids = {s.id for s in summaries}
        assert seen_ids <= ids, f"lost point sets a client had seen: {sorted(seen_ids - ids)}"
        for s in summaries:
            ps = store.get_point_set(s.id, with_hits=True)
            assert sum(h.accepted for h in ps.hits) == ps.n_averages == s.n_averages
            assert all(h.data is not None for h in ps.hits)
            assert ps.h1.shape[-1] == ps.freq_hz.shape[0]
            stored = store.get_wire_body(s.id, records.SCHEMA_VERSION)
            assert stored is not None, f"point set {s.id} has no wire body"
            digest, body = stored
            assert digest == content_digest(body)
        changes = store.changes(0, 1 << 30)
        seqs = [c.seq for c in changes]
        assert seqs == sorted(set(seqs)) and (not seqs or seqs[-1] == store.last_seq())
        return len(summaries)
