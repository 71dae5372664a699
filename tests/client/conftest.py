"""Client test fixtures.

1. A rig served on loopback for client tests: a real RunningRig on the simulated test piece, its
SQLite store filled with point sets, and the real HTTP service on an ephemeral port, its event
loop in a thread of its own so that the blocking client can run in the test's thread.

2. A test captured by the real daemon on the simulated test piece, as the client sees it.

The rig runs in-process on the simulated panel over a real pseudo-terminal; a simulated
operator taps every grid point; the committed point sets are read back from the SQLite
store, converted to the wire records the client receives and assembled into `TestData`.
The rig is stopped before the data is handed out, so no thread outlives the fixture.
"""

from __future__ import annotations

import asyncio
import contextlib
import dataclasses
import math
import queue
import threading
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

from taprig.client.dataset import TestData, assemble
from taprig.client.rigs import PairedRig, Places, RigBook
from taprig.daemon.api.service import Service
from taprig.daemon.auth import Auth
from taprig.daemon.config import load_config
from taprig.daemon.lifespan import RunningRig, start_rig
from taprig.daemon.records import Finding, GridPoint, PointSet, RovingMode, StoredHit
from taprig.daemon.rigstate import RigEvent
from taprig.firmware_protocol.simpiece import (
    DEMO_DRIVING_POINT,
    ModalModel,
    demo_panel,
    load_truth,
    write_truth,
)
from taprig.firmware_protocol.simpiece.instrument import InstrumentSettings
from taprig.schema import records

N_RESP = 2
N_FREQ = 4097


@dataclass
class ServedRig:
    running: RunningRig
    service: Service
    token: str
    loop: LoopThread

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self.service.port}"

    @property
    def rig_id(self) -> str:
        return self.service.rig_id

    def service_stop(self) -> None:
        """Stop serving (the rig goes away from the LAN); idempotent."""
        self.loop.close()


class LoopThread:
    """An asyncio loop in a thread, holding one Service; `close()` stops both."""

    def __init__(self, service: Service) -> None:
        self.service = service
        self.loop = asyncio.new_event_loop()
        self.thread = threading.Thread(target=self.loop.run_forever, name="service-loop")
        self.thread.start()
        asyncio.run_coroutine_threadsafe(service.async_start(), self.loop).result(30)

    def close(self) -> None:
        if self.loop.is_closed():
            return
        asyncio.run_coroutine_threadsafe(self.service.async_close(), self.loop).result(30)
        self.loop.call_soon_threadsafe(self.loop.stop)
        self.thread.join(30)
        self.loop.close()


def commit_synthetic(
    running: RunningRig, test: str, points: int, seed: int = 5, measured: int | None = None
) -> None:
    """A test of `points` grid points and one point set each of random arrays (for the first
    `measured` points only, when given: a partial test), committed through the store as the
    rig commits (wire body encoded in the same transaction)."""
    rng = np.random.default_rng(seed)
    store = running.store
    grid = [GridPoint(f"P{i}", 0.01 * i, 0.02, 0.0) for i in range(points)]
    store.save_test(test, grid, RovingMode.HAMMER, "P0", 3, {"sensor_points": {}})

    def cplx() -> np.ndarray:
        return rng.normal(size=(N_RESP, N_FREQ)) + 1j * rng.normal(size=(N_RESP, N_FREQ))

    for p in grid[:measured]:
        hits = (
            StoredHit(100, "2026-01-01T00:00:00Z", True, 40.0, 8e-4, (), None),
            StoredHit(900, "2026-01-01T00:00:01Z", False, 41.0, 8e-4,
                      (Finding("double_hit", "double hit"),), None),
        )  # fmt: skip
        store.commit_point_set(PointSet(
            test=test, point=p.label, version=0, roving_mode=RovingMode.HAMMER,
            drive_point=p.label, response_labels=tuple(f"acc{k}" for k in range(N_RESP)),
            response_points=("P0",) * N_RESP, n_averages=3,
            freq_hz=np.linspace(0.0, 12_800.0, N_FREQ), h1=cplx(), h2=cplx(),
            coherence=rng.uniform(size=(N_RESP, N_FREQ)), gff=rng.uniform(size=N_FREQ),
            gxx=rng.uniform(size=(N_RESP, N_FREQ)), gfx=cplx(), hits=hits,
            meta={"exp_tau_s": 0.05, "sample_rate_hz": 25_600.0},
        ))  # fmt: skip


@contextlib.contextmanager
def serving(data_dir: Path) -> Iterator[ServedRig]:
    """The real rig on the simulated test piece with its store in `data_dir`, served."""
    cfg = load_config(None, [f"store.data_dir={data_dir}", "store.min_free_mb=1"])
    running = start_rig(cfg)
    auth = Auth(data_dir, max_failures=10_000)
    try:
        service = Service(running, auth)
        loop = LoopThread(service)
        try:
            yield ServedRig(running, service, auth.token, loop)
        finally:
            loop.close()
    finally:
        running.close()


@pytest.fixture
def served(tmp_path: Path) -> Iterator[ServedRig]:
    with serving(tmp_path / "rig") as rig:
        yield rig


@pytest.fixture
def places(tmp_path: Path) -> Places:
    return Places.from_env({"TAPRIG_HOME": str(tmp_path / "home")})


def pair(places: Places, served: ServedRig) -> PairedRig:
    rig = PairedRig(served.rig_id, "test-rig", served.url, served.token)
    RigBook(places).save(rig)
    return rig


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
        piece = r.instrument
        assert piece is not None
        events: queue.Queue[RigEvent] = queue.Queue()
        r.rig.subscribe(events.put)
        _until(lambda: r.rig.view().info is not None, "the device to identify itself")
        m = piece.model
        grid = [GridPoint(p, *map(float, m.coords[m.index(p)])) for p in m.grid]
        sensors = m.sensor_places()
        r.rig.create_test("panel-check", grid, RovingMode.HAMMER,
                          reference=DEMO_DRIVING_POINT, sensor_points=sensors)  # fmt: skip
        r.rig.select_test("panel-check")
        r.rig.arm()
        rung_down = 0
        for label in m.grid:
            for force in FORCES_N:
                _until(_streamed_to(r, rung_down), "the previous tap to ring down")
                tap = piece.tap(label, force_n=force)
                assert tap is not None
                hit = _next(events, "hit")
                assert hit.data["counted"], (label, hit.data["rejections"])
                rung_down = tap.first_index + math.ceil(RING_DOWN_S * piece.rate_hz)
            assert _next(events, "completed").data["point"] == label
        store = r.store
        sets = [
            records.point_set_from_record(s.id, store.get_point_set(s.id, True))
            for s in store.list_point_sets(test="panel-check")
        ]
        test = records.test_from_record(store.get_test("panel-check"))
    finally:
        r.close()
    data = assemble(test, sets, rig="simulated", rig_id="simulated-1")
    assert data.points == tuple(CAPTURE_MODEL.grid)
    assert np.all(data.n_averages == AVERAGES)
    return Captured(data=data, truth=load_truth(truth_path))
