"""The rig under bad input: pulled cable, garbage on the line, lost frames, no disk room,
a wrong configuration. It says what is wrong, keeps what it had, and carries on."""

from __future__ import annotations

import contextlib
import sqlite3
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path

import pytest

from taprig.daemon.config import load_config
from taprig.daemon.errors import SessionError
from taprig.daemon.lifespan import RunningRig, start_rig

from .test_rig import DAMPED, Events, grid_of, operator_pause, tap_and_wait, wait_info


def start(tmp_path: Path, *extra: str) -> RunningRig:
    cfg = load_config(None, [f"store.data_dir={tmp_path}", "capture.block=4096",
                             "capture.averages=2", "store.min_free_mb=1", *extra])  # fmt: skip
    return start_rig(cfg, model=DAMPED)


@pytest.fixture
def running(tmp_path: Path) -> Iterator[RunningRig]:
    r = start(tmp_path)
    try:
        wait_info(r)
        assert r.instrument is not None
        r.rig.create_test("t", grid_of(r.instrument, ["A1", "B2", "C3"]))
        r.rig.select_test("t")
        r.rig.arm()
        yield r
    finally:
        r.close()


def wait_state(ev: Events, state: str, timeout: float = 5.0) -> None:
    deadline = time.monotonic() + timeout
    while True:
        e = ev.next("device", timeout=max(0.01, deadline - time.monotonic()))
        if e.data["state"] == state:
            return


def test_unplug_and_replug_mid_point(running: RunningRig) -> None:
    """The link comes back within a second of the device, the session keeps its averages."""
    r, piece = running, running.instrument
    assert piece is not None
    ev = Events(r)
    assert tap_and_wait(r, ev, "A1").data["counted"]
    piece.unplug()
    wait_state(ev, "disconnected")
    t0 = time.monotonic()
    piece.replug()
    wait_state(ev, "connected", timeout=2.0)
    assert time.monotonic() - t0 < 1.0
    deadline = time.monotonic() + 5
    while not piece.streaming:  # the rig sends START again on reconnect
        assert time.monotonic() < deadline
        time.sleep(0.01)
    hit = tap_and_wait(r, ev, "A1")
    assert hit.data["counted"] and hit.data["averages"] == 2
    assert ev.next("completed").data["point"] == "A1"
    assert r.rig.snapshot()["link"]["reconnects"] == 1


def test_garbage_and_lost_frames_then_clean_taps(running: RunningRig) -> None:
    r, piece = running, running.instrument
    assert piece is not None
    ev = Events(r)
    piece.faults.corrupt_probability = 0.3
    piece.faults.drop_frame_probability = 0.1
    deadline = time.monotonic() + 5
    while r.rig.snapshot()["link"]["crc_errors"] < 5:
        assert time.monotonic() < deadline
        time.sleep(0.02)
    piece.faults.corrupt_probability = piece.faults.drop_frame_probability = 0.0
    for _ in range(2):
        assert tap_and_wait(r, ev, "A1").data["counted"]
    assert ev.next("completed").data["point"] == "A1"
    snap = r.rig.snapshot()
    assert snap["link"]["samples_lost"] > 0 and snap["state"] == "connected"


def test_hit_across_lost_frames_is_rejected(running: RunningRig) -> None:
    """With half the frames lost, a tap whose pulse frame is lost never triggers at all (as
    with a real device); the operator taps again until one does, and that hit straddles lost
    samples."""
    r, piece = running, running.instrument
    assert piece is not None
    ev = Events(r)
    piece.faults.drop_frame_probability = 0.5
    hit = None
    for _ in range(20):  # P(20 pulses lost) is about 1e-6
        operator_pause(r)
        ev.clear()
        assert piece.tap("A1") is not None
        with contextlib.suppress(AssertionError):  # no hit: the pulse itself was lost
            hit = ev.next("hit", timeout=3.0)
            break
    piece.faults.drop_frame_probability = 0.0
    assert hit is not None, "no tap got through"
    assert not hit.data["accepted"]
    assert "gap" in [code for code, _ in hit.data["rejections"]]


def test_full_store_keeps_old_data_and_recovers(running: RunningRig) -> None:
    r = running
    ev = Events(r)
    for _ in range(2):
        tap_and_wait(r, ev, "A1")
    ev.next("completed")
    before = r.store.list_point_sets()
    with sqlite3.connect(r.store.path) as db:  # the pages in use now (WAL included)
        pages = int(db.execute("PRAGMA page_count").fetchone()[0])
    r.store.set_max_pages(pages)  # test hook: the disk is full
    for _ in range(2):
        tap_and_wait(r, ev, "B2")
    msg = ev.next("message")
    assert "not stored" in msg.data["text"] and "full" in msg.data["text"]
    assert r.store.list_point_sets() == before
    assert r.store.integrity_check() == "ok"
    r.store.set_max_pages(1 << 30)  # room again: measure the point again
    r.rig.goto("B2")
    for _ in range(2):
        tap_and_wait(r, ev, "B2")
    assert ev.next("completed").data["point"] == "B2"
    assert len(r.store.list_point_sets()) == 2


def test_refuses_to_arm_without_disk_room(tmp_path: Path) -> None:
    r = start(tmp_path, "store.min_free_mb=100000000")
    try:
        wait_info(r)
        assert r.instrument is not None
        r.rig.create_test("t", grid_of(r.instrument, ["A1"]))
        r.rig.select_test("t")
        with pytest.raises(SessionError, match=r"MB free in .* needs 100000000 MB to arm"):
            r.rig.arm()
        assert not r.rig.view().armed
    finally:
        r.close()


def test_config_error_stops_start_up_with_the_key(tmp_path: Path) -> None:
    out = subprocess.run(
        [sys.executable, "-m", "taprig.daemon", "run", "--set", "capture.block=1000",
         "--set", f"store.data_dir={tmp_path}"],
        capture_output=True, text=True, timeout=60,
    )  # fmt: skip
    assert out.returncode == 2
    assert "capture.block = 1000" in out.stderr and "power of two" in out.stderr
    assert not (tmp_path / "taprig.sqlite3").exists()


def test_overload_from_the_instrument_is_rejected(running: RunningRig) -> None:
    """A tap far too hard for the input range clips at full scale: rejected as overload."""
    r = running
    ev = Events(r)
    hit = tap_and_wait(r, ev, "A1", overload=True)
    assert not hit.data["accepted"]
    assert "overload" in [code for code, _ in hit.data["rejections"]]
    assert tap_and_wait(r, ev, "A1").data["counted"]  # the next clean tap counts
