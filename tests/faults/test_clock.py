"""The board's wall clock set back (an NTP step after a boot without a clock battery, or an
operator fixing the date): a client that follows the change sequence still gets every point
set exactly once, although completed_utc now runs backwards.

The rig captures on the simulated test piece and serves /v1 on loopback for real. The wall
clock is injected where the daemon reads it for point sets and hits (`session.utc_now`),
stepped back one hour and then one more: the machine's own clock cannot be changed in a
test, and libfaketime (Debian 0.9.10) breaks Python's sleeps (clock_nanosleep fails with
EINVAL), so it cannot drive a whole daemon.
"""

from __future__ import annotations

import asyncio
import datetime as dt
import math
import time
from pathlib import Path
from typing import Any

import aiohttp
import pytest

from taprig.daemon.api.service import Service
from taprig.daemon.auth import Auth
from taprig.daemon.capture import session as session_module
from taprig.daemon.config import load_config
from taprig.daemon.lifespan import RunningRig, start_rig
from taprig.daemon.records import GridPoint
from taprig.firmware_protocol.simpiece.modal import demo_panel
from tests.daemon.test_rig import wait_streamed

PAUSE_S = 0.15  # between taps: longer than one 4096-sample record at 51.2 kHz (80 ms)


class SteppedClock:
    """The wall clock as the daemon reads it: the real one plus an offset set by the test."""

    def __init__(self) -> None:
        self.offset = dt.timedelta(0)

    def utc_now(self) -> str:
        now = dt.datetime.now(dt.UTC) + self.offset
        return now.isoformat(timespec="milliseconds").replace("+00:00", "Z")


def capture_one(r: RunningRig) -> None:
    """One tap that completes a point (averages = 1); waits until it is stored."""
    before = len(r.store.list_point_sets())
    piece = r.instrument
    assert piece is not None
    tap = piece.tap("A1")
    assert tap is not None
    deadline = time.monotonic() + 10
    while len(r.store.list_point_sets()) == before:
        assert time.monotonic() < deadline, "the point set was never stored"
        time.sleep(0.02)
    # The operator's pause before the next tap, on the device's sample clock.
    wait_streamed(r, tap.first_index + math.ceil(PAUSE_S * piece.rate_hz))


class Follower:
    """A client that syncs by change sequence: /v1/changes?since=<last seq seen>."""

    def __init__(self, http: aiohttp.ClientSession, token: str) -> None:
        self.http, self.headers = http, {"Authorization": f"Bearer {token}"}
        self.since = 0
        self.got: list[tuple[int, str]] = []  # (point set id, completed_utc) in arrival order

    async def poll(self) -> None:
        feed = await self._get(f"/v1/changes?since={self.since}")
        for change in feed["changes"]:
            if change["kind"] == "point_set":
                ps = await self._get(f"/v1/points/{change['point_set_id']}")
                self.got.append((ps["id"], ps["completed_utc"]))
        self.since = feed["last_seq"]

    async def _get(self, path: str) -> Any:
        async with self.http.get(path, headers=self.headers) as resp:
            assert resp.status == 200, path
            return await resp.json()


def test_wall_clock_set_back_sync_by_seq_is_exact(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    clock = SteppedClock()
    monkeypatch.setattr(session_module, "utc_now", clock.utc_now)
    cfg = load_config(None, [f"store.data_dir={tmp_path / 'data'}", "capture.block=4096",
                             "capture.averages=1", "store.min_free_mb=1"])  # fmt: skip
    model = demo_panel()
    r = start_rig(cfg, model=model)
    try:
        deadline = time.monotonic() + 10
        while r.rig.view().info is None:
            assert time.monotonic() < deadline
            time.sleep(0.02)
        grid = [GridPoint(p, *(float(v) for v in model.coords[model.index(p)])) for p in model.grid]
        r.rig.create_test("clock", grid)
        r.rig.select_test("clock")
        r.rig.arm()
        asyncio.run(asyncio.wait_for(follow_through_steps(r, clock), 120))
    finally:
        r.close()


async def follow_through_steps(r: RunningRig, clock: SteppedClock) -> None:
    auth = Auth(r.config.store.data_dir)
    service = Service(r, auth, host="127.0.0.1", port=0)
    await service.async_start()
    try:
        async with aiohttp.ClientSession(f"http://127.0.0.1:{service.port}") as http:
            client = Follower(http, auth.token)
            for offset_h in (0, -1, -2):  # the clock stepped back twice
                clock.offset = dt.timedelta(hours=offset_h)
                for _ in range(3):
                    await asyncio.to_thread(capture_one, r)
                await client.poll()  # the client syncs between steps and at the end
            await client.poll()
    finally:
        await service.async_close()
    ids = [i for i, _ in client.got]
    stored = [s.id for s in r.store.list_point_sets()]
    assert sorted(ids) == sorted(stored) and len(ids) == len(set(ids)) == 9  # each exactly once
    times = [t for _, t in client.got]
    # The clock did go back: a client asking "what is newer than the newest time I have"
    # would have missed every point set after a step.
    assert times[3] < times[2] and times[6] < times[5]
    missed_by_time = [t for k, t in enumerate(times) if k >= 3 and t <= max(times[:3])]
    assert len(missed_by_time) == 6
