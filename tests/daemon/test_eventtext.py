"""Rig events in the log are sentences, not dict dumps; counts take the right plural."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

from taprig.daemon.eventtext import count, event_text
from taprig.daemon.rigstate import RigEvent


def test_counts() -> None:
    assert count(1, "test") == "1 test" and count(0, "test") == "0 tests"
    assert count(2, "point set") == "2 point sets" and count(1, "point set") == "1 point set"


def test_each_kind_reads_as_a_sentence() -> None:
    hit = RigEvent("hit", {"point": "B3", "accepted": True, "counted": True, "waiting": False,
                           "averages": 1, "peak_force_n": 31.24, "rejections": []})  # fmt: skip
    assert event_text(hit) == "hit at B3: counted, 1 average so far (peak 31.2 N)"
    bad = RigEvent("hit", {"point": "A2", "counted": False, "waiting": False,
                           "rejections": [("double_hit", "double hit: struck twice")],
                           "peak_force_n": 20.0})  # fmt: skip
    assert event_text(bad) == "hit at A2: rejected: double hit: struck twice (peak 20.0 N)"
    done = RigEvent("completed", {"point": "B3", "version": 0, "seq": 7, "averages": 2})
    assert event_text(done) == "point B3 complete: 2 averages stored as version 0 (change 7)"
    cursor = RigEvent("cursor", {"armed": True, "test": "deck", "point": "A2", "averages": 0,
                                 "required": 1, "done": ["A1"], "state": "connected"})  # fmt: skip
    assert event_text(cursor) == ("armed; test deck at A2, 0 of 1 average; 1 point done; "
                                  "device connected")  # fmt: skip


def test_the_daemon_log_has_no_dict_dumps(tmp_path: Path) -> None:
    done = subprocess.run(
        [sys.executable, "-m", "taprig.daemon", "run", "--test", "demo", "--duration", "3",
         "--sim-taps", "0.5", "--set", "device.url=simulated",
         "--set", f"store.data_dir={tmp_path}", "--set", "store.min_free_mb=1",
         "--set", "service.bind=127.0.0.1", "--set", "service.port=0",
         "--set", "service.advertise=false", "--set", "capture.block=4096"],
        capture_output=True, text=True, timeout=120)  # fmt: skip
    assert done.returncode == 0, done.stderr
    rig_lines = [ln for ln in done.stderr.splitlines() if " taprig.daemon: " in ln]
    assert any("armed; test demo at" in ln for ln in rig_lines), done.stderr
    assert not any("{'" in ln for ln in rig_lines), done.stderr
