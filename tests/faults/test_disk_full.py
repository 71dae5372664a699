"""The disk fills up under a running taprigd: a real tmpfs of a few MB as the data folder.

Two cases, each on its own small tmpfs (mounted by the test; CI runs as root):
- store.min_free_mb = 0, the disk filled to the last byte while armed: the completed point
  set cannot be committed, the daemon says so ("not stored ... full") and keeps running,
  everything stored before is intact, and once space is freed the next point is stored.
- store.min_free_mb = 8, free space pushed below it: the rig pauses capture by itself,
  refuses to arm with a clear error, keeps serving what it has, and resumes by itself when
  space returns.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import subprocess
from collections.abc import Iterator
from pathlib import Path

import pytest

from .process import Taprigd, check_store, wait_until

TMPFS_MB = 40


@pytest.fixture
def small_disk(tmp_path: Path) -> Iterator[Path]:
    if os.geteuid() != 0:
        if os.environ.get("CI") == "true":
            pytest.fail("CI must run as root: the disk-full tests mount a tmpfs")
        pytest.skip("mounting a tmpfs needs root (set CI=true to require it)")
    where = tmp_path / "disk"
    where.mkdir()
    subprocess.run(["mount", "-t", "tmpfs", "-o", f"size={TMPFS_MB}m,mode=0700", "tmpfs",
                    str(where)], check=True)  # fmt: skip
    try:
        (where / "rig").mkdir()
        yield where
    finally:
        subprocess.run(["umount", "-l", str(where)], check=True)


def free_mb(path: Path) -> float:
    return shutil.disk_usage(path).free / 1e6


def fill(ballast: Path, leave_mb: float) -> None:
    """Grow `ballast` until only `leave_mb` MB are free (0: until the disk refuses a byte)."""
    fd = os.open(ballast, os.O_WRONLY | os.O_CREAT | os.O_APPEND, 0o600)
    try:
        for step in (65536, 4096, 512, 1):  # smaller and smaller, to the last byte
            with contextlib.suppress(OSError):  # ENOSPC
                while leave_mb == 0 or free_mb(ballast.parent) - step / 1e6 > leave_mb:
                    os.write(fd, b"\0" * step)
    finally:
        os.close(fd)


def point_ids(daemon: Taprigd) -> set[int]:
    return {p["id"] for p in daemon.get("/v1/points")["points"]}


def tap_and_count(daemon: Taprigd, expect: int) -> None:
    daemon.control("tap", point="A1")
    wait_until(f"{expect} point sets", lambda: len(point_ids(daemon)) == expect, 5.0)


def test_disk_full_while_armed_refuses_the_commit_and_recovers(
    small_disk: Path, tmp_path: Path
) -> None:
    data = small_disk / "rig"
    daemon = Taprigd(data, "store.min_free_mb=0", log_dir=tmp_path).start().wait_ready()
    try:
        for n in (1, 2):
            tap_and_count(daemon, n)
        seen = point_ids(daemon)
        fill(small_disk / "ballast", 0)
        assert free_mb(small_disk) < 0.01
        daemon.control("tap", point="A1")
        wait_until("the refusal", lambda: "not stored" in daemon.log(), 5.0)
        line = next(x for x in daemon.log().splitlines() if "not stored" in x)
        assert "no room left" in line and "full" in line, line
        assert point_ids(daemon) == seen  # still serving what it has
        assert daemon.get("/v1/state")["session"]["armed"]
        (small_disk / "ballast").unlink()
        tap_and_count(daemon, 3)  # the point is measured again and stored
    finally:
        assert daemon.stop() == 0, daemon.log()
    assert check_store(data, seen) == 3
    assert "Traceback" not in daemon.log()


def test_low_disk_pauses_capture_and_resumes_when_space_returns(
    small_disk: Path, tmp_path: Path
) -> None:
    data = small_disk / "rig"
    daemon = Taprigd(data, "store.min_free_mb=8", log_dir=tmp_path).start().wait_ready()
    try:
        tap_and_count(daemon, 1)
        seen = point_ids(daemon)
        fill(small_disk / "ballast", 4.0)
        wait_until("the pause", lambda: not daemon.session()["armed"], 5.0)
        disk = daemon.session()["disk"]
        assert disk["waiting_for_room"] and disk["free_mb"] < 8 and disk["min_free_mb"] == 8
        assert "capture paused until there is room" in daemon.log()
        status, answer = daemon.request("POST", "/v1/session/arm", {"request_id": "arm-low-1"})
        assert status == 409
        assert "MB free" in answer["message"] and "arms by itself" in answer["message"]
        hits = daemon.get("/v1/state")["hits_while_disarmed"]
        daemon.control("tap", point="A1")
        wait_until("the ignored hit", lambda: daemon.get("/v1/state")["hits_while_disarmed"]
                   > hits, 5.0)  # fmt: skip
        assert point_ids(daemon) == seen  # nothing new, everything old still served
        assert daemon.request("GET", f"/v1/points/{min(seen)}")[0] == 200
        (small_disk / "ballast").unlink()
        wait_until("the resume", lambda: daemon.session()["armed"], 5.0)
        assert not daemon.session()["disk"]["waiting_for_room"]
        assert "capture resumed" in daemon.log()
        tap_and_count(daemon, 2)
    finally:
        assert daemon.stop() == 0, daemon.log()
    assert check_store(data, seen) == 2
