"""A rig served on loopback for client tests: a real RunningRig on the virtual instrument, its
SQLite store filled with point sets, and the real HTTP service on an ephemeral port, its event
loop in a thread of its own so that the blocking client can run in the test's thread."""

from __future__ import annotations

import asyncio
import threading
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

from taprig.client.rigs import PairedRig, Places, RigBook
from taprig.daemon.auth import Auth
from taprig.daemon.config import load_config
from taprig.daemon.records import Finding, GridPoint, PointSet, RovingMode, StoredHit
from taprig.daemon.runner import RunningRig, start_rig
from taprig.daemon.service import Service

N_RESP = 2
N_FREQ = 4097


@dataclass
class ServedRig:
    running: RunningRig
    service: Service
    token: str

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self.service.port}"

    @property
    def rig_id(self) -> str:
        return self.service.rig_id


class LoopThread:
    """An asyncio loop in a thread, holding one Service; `close()` stops both."""

    def __init__(self, service: Service) -> None:
        self.service = service
        self.loop = asyncio.new_event_loop()
        self.thread = threading.Thread(target=self.loop.run_forever, name="service-loop")
        self.thread.start()
        asyncio.run_coroutine_threadsafe(service.async_start(), self.loop).result(30)

    def close(self) -> None:
        asyncio.run_coroutine_threadsafe(self.service.async_close(), self.loop).result(30)
        self.loop.call_soon_threadsafe(self.loop.stop)
        self.thread.join(30)
        self.loop.close()


def commit_synthetic(running: RunningRig, test: str, points: int, seed: int = 5) -> None:
    """A test of `points` grid points and one point set each of random arrays, committed
    through the store as the rig commits (wire body encoded in the same transaction)."""
    rng = np.random.default_rng(seed)
    store = running.store
    grid = [GridPoint(f"P{i}", 0.01 * i, 0.02, 0.0) for i in range(points)]
    store.save_test(test, grid, RovingMode.HAMMER, "P0", 3, {"sensor_points": {}})

    def cplx() -> np.ndarray:
        return rng.normal(size=(N_RESP, N_FREQ)) + 1j * rng.normal(size=(N_RESP, N_FREQ))

    for p in grid:
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


@pytest.fixture
def served(tmp_path: Path) -> Iterator[ServedRig]:
    cfg = load_config(None, [f"store.data_dir={tmp_path / 'rig'}", "store.min_free_mb=1"])
    running = start_rig(cfg)
    auth = Auth(tmp_path / "rig", max_failures=10_000)
    try:
        service = Service(running, auth)
        loop = LoopThread(service)
        try:
            yield ServedRig(running, service, auth.token)
        finally:
            loop.close()
    finally:
        running.close()


@pytest.fixture
def places(tmp_path: Path) -> Places:
    return Places.from_env({"TAPRIG_HOME": str(tmp_path / "home")})


def pair(places: Places, served: ServedRig) -> PairedRig:
    rig = PairedRig(served.rig_id, "test-rig", served.url, served.token)
    RigBook(places).save(rig)
    return rig
