"""kill -9 of taprigd at random moments during capture loses nothing a client had seen.

Thirty rounds on one store: start the daemon, tap and follow the change feed as a client
would, and send SIGKILL from another thread at a random moment, so that it lands anywhere:
mid-hit, mid-commit, mid-request. After each kill the store is opened as a restarted daemon
opens it and checked whole (`process.check_store`): SQLite's integrity_check passes, every
point set the client saw listed is there, and no point set is partial.
"""

from __future__ import annotations

import random
import threading
import time
import urllib.error
from pathlib import Path

import pytest

from .process import Taprigd, check_store, tap_until_accepted, wait_until

ROUNDS = 30
TAP_EVERY_S = 0.12  # longer than one 4096-sample record at 51.2 kHz (80 ms)
# Points enough that the rounds never finish the test (a finished test stores no more taps):
# the roving hammer's cursor names each tap's point, wherever on the panel it lands.
GRID_POINTS = 200


@pytest.mark.slow
def test_kill9_at_random_moments_keeps_every_point_set_seen(tmp_path: Path) -> None:
    rng = random.Random(20261202)
    data = tmp_path / "rig"
    data.mkdir()
    seen: set[int] = set()
    since = 0
    grid = tmp_path / "grid.csv"
    grid.write_text("label,x,y,z\n" + "".join(f"P{i},{i / 1000},0,0\n"
                                               for i in range(GRID_POINTS)))  # fmt: skip
    for k in range(ROUNDS):
        # The first round creates the test from the grid file; later ones open it again.
        daemon = Taprigd(data, args=("--grid", str(grid)) if k == 0 else ()).start().wait_ready()
        killer = threading.Timer(rng.uniform(0.05, 1.2), daemon.kill9)
        killer.start()
        try:
            while daemon.proc is not None and daemon.proc.poll() is None:
                try:
                    daemon.control("tap", point="A1")
                    status, feed = daemon.request("GET", f"/v1/changes?since={since}")
                except (OSError, urllib.error.URLError, ValueError):
                    break  # the kill landed mid-request (refused, reset, or a cut reply)
                if status == 200:
                    # Seen as complete: listed in an answer that reached the client whole.
                    seen |= {c["point_set_id"] for c in feed["changes"] if c["point_set_id"]}
                    since = feed["last_seq"]
                time.sleep(TAP_EVERY_S)
        finally:
            killer.join()
        assert daemon.proc is not None and daemon.proc.returncode == -9
        stored = check_store(data, seen)
        assert stored >= len(seen)
    # The rounds did capture: on average more than one point set each.
    assert len(seen) > ROUNDS, len(seen)


def test_restarted_after_kill9_carries_on_with_the_test(tmp_path: Path) -> None:
    """Started as systemd starts it (no --test) after a kill -9, the rig selects the test it
    had and arms again if it was armed; disarmed, it stays disarmed."""
    data = tmp_path / "rig"
    data.mkdir()
    first = Taprigd(data).start().wait_ready()
    first.control("tap", point="A1")
    wait_until("stored", lambda: len(first.get("/v1/points")["points"]) == 1, 5.0)
    first.kill9()

    again = Taprigd(data, test=None).start().wait_ready()
    try:
        wait_until("carried on", lambda: again.session()["armed"], 10.0)
        session = again.session()
        assert session["test"] == "shop" and session["point"] == "A2" and session["done"] == ["A1"]
        assert tap_until_accepted(again)["point"] == "A2"
        wait_until("stored", lambda: len(again.get("/v1/points")["points"]) == 2, 5.0)
        status, _ = again.request("POST", "/v1/session/disarm", {"request_id": "disarm-kill"})
        assert status == 200
    finally:
        again.kill9()

    third = Taprigd(data, test=None).start().wait_ready()
    try:
        wait_until("selected", lambda: third.session()["test"] == "shop", 10.0)
        assert not third.session()["armed"]
        assert third.log().count("rig: carried on with test shop") == 2  # the log is shared
    finally:
        assert third.stop() == 0
