"""A test captured by the real daemon on the virtual instrument, as the client sees it.

The rig runs in-process on the virtual panel over a real pseudo-terminal; a simulated
operator taps every grid point; the committed point sets are read back from the SQLite
store, converted to the wire records the client receives and assembled into `TestData`.
The rig is stopped before the data is handed out, so no thread outlives the fixture.
"""

from __future__ import annotations

import dataclasses
import math
import queue
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest

from taprig.client.dataset import TestData, assemble
from taprig.daemon.config import load_config
from taprig.daemon.records import GridPoint, RovingMode
from taprig.daemon.rig import RigEvent
from taprig.daemon.runner import RunningRig, start_rig
from taprig.firmware_protocol.virtual import (
    DEMO_DRIVING_POINT,
    ModalModel,
    demo_panel,
    load_truth,
    write_truth,
)
from taprig.firmware_protocol.virtual.instrument import InstrumentSettings
from taprig.schema import wire

# Every mode of the demo panel decays at 12 /s (mass-proportional damping: C = αM gives
# ζ_r = α/(2ω_r); Rayleigh, The Theory of Sound, 1877, §97, from memory), 2.9 % at the
# first mode and 0.2 % at 1 kHz: a tap dies away to -60 dB in 0.58 s whatever its modes,
# and every mode has the same half-power bandwidth, 12/π = 3.8 Hz.
DECAY_PER_S = 12.0
_PANEL = demo_panel(3000.0)
CAPTURE_MODEL = dataclasses.replace(_PANEL, damping_ratio=DECAY_PER_S / _PANEL.omega)
RATE_HZ = 25_600.0  # with a block of 16384: 0.64 s records, 1.5625 Hz lines
BLOCK = 16_384
AVERAGES = 2
FORCES_N = (25.0, 35.0)
RING_DOWN_S = math.log(1e3) / DECAY_PER_S  # to -60 dB before the next tap


def _until(ready: Callable[[], bool], what: str, timeout: float = 10.0) -> None:
    deadline = time.monotonic() + timeout
    while not ready():
        assert time.monotonic() < deadline, f"timed out waiting for {what}"
        time.sleep(0.01)


def _next(events: queue.Queue[RigEvent], kind: str, timeout: float = 10.0) -> RigEvent:
    """The next rig event of `kind`, skipping others; fails after `timeout` s."""
    deadline = time.monotonic() + timeout
    while True:
        left = deadline - time.monotonic()
        assert left > 0, f"no {kind} event in {timeout} s"
        try:
            ev = events.get(timeout=left)
        except queue.Empty:
            continue
        if ev.kind == kind:
            return ev


def _streamed_to(r: RunningRig, index: int) -> Callable[[], bool]:
    """Whether the daemon has decoded the device's samples up to `index`."""
    assert r.instrument is not None
    per_frame = r.instrument.settings.frame_samples
    return lambda: int(r.rig.snapshot()["link"]["frames_ok"]) * per_frame >= index


@dataclasses.dataclass(frozen=True)
class Captured:
    data: TestData
    truth: ModalModel


@pytest.fixture(scope="session")
def captured_panel(tmp_path_factory: pytest.TempPathFactory) -> Captured:
    """Every point of the demo grid tapped AVERAGES times (roving hammer, acc1 on B3)."""
    tmp: Path = tmp_path_factory.mktemp("captured")
    truth_path = tmp / "truth.json"
    write_truth(CAPTURE_MODEL, truth_path)
    cfg = load_config(
        None,
        [f"store.data_dir={tmp}", f"capture.block={BLOCK}", f"capture.averages={AVERAGES}",
         "store.min_free_mb=1"],
    )  # fmt: skip
    r = start_rig(cfg, InstrumentSettings(rate_hz=RATE_HZ), model=CAPTURE_MODEL)
    try:
        vi = r.instrument
        assert vi is not None
        events: queue.Queue[RigEvent] = queue.Queue()
        r.rig.subscribe(events.put)
        _until(lambda: r.rig.info is not None, "the device to identify itself")
        m = vi.model
        grid = [GridPoint(p, *map(float, m.coords[m.index(p)])) for p in m.grid]
        sensors = dict(m.sensors)
        r.rig.create_test("panel-check", grid, RovingMode.HAMMER,
                          reference=DEMO_DRIVING_POINT, sensor_points=sensors)  # fmt: skip
        r.rig.select_test("panel-check")
        r.rig.arm()
        rung_down = 0
        for label in m.grid:
            for force in FORCES_N:
                _until(_streamed_to(r, rung_down), "the previous tap to ring down")
                tap = vi.tap(label, force_n=force)
                assert tap is not None
                hit = _next(events, "hit")
                assert hit.data["counted"], (label, hit.data["rejections"])
                rung_down = tap.first_index + math.ceil(RING_DOWN_S * vi.rate_hz)
            assert _next(events, "completed").data["point"] == label
        store = r.store
        sets = [
            wire.point_set_from_record(s.id, store.get_point_set(s.id, True))
            for s in store.list_point_sets(test="panel-check")
        ]
        test = wire.test_from_record(store.get_test("panel-check"))
    finally:
        r.close()
    data = assemble(test, sets, rig="virtual", rig_id="virtual-1")
    assert data.points == tuple(CAPTURE_MODEL.grid)
    assert np.all(data.n_averages == AVERAGES)
    return Captured(data=data, truth=load_truth(truth_path))
