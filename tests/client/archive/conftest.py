"""Archive fixtures: one real PostgreSQL server per session, a fresh database per test, and
real rigs (the real store and service on loopback, as tests/client/conftest.py serves one).

The rigs' simulated test pieces stream at 1 kHz, not 51.2 kHz: the archive only reads stored
point sets, and three or more rigs in one process would otherwise load a 2-core machine.
"""

from __future__ import annotations

import dataclasses
import itertools
import os
import time
from collections.abc import Callable, Iterator
from pathlib import Path

import numpy as np
import pytest

from taprig.client.archive.config import ArchiveConfig, RigSource
from taprig.client.archive.db import migrate
from taprig.client.archive.follow import Archiver
from taprig.daemon.api.service import Service
from taprig.daemon.auth import Auth
from taprig.daemon.config import load_config
from taprig.daemon.lifespan import RunningRig, start_rig
from taprig.daemon.records import GridPoint, PointSet, RovingMode, StoredHit
from taprig.firmware_protocol.simpiece import ModalModel, accelerance, demo_panel
from taprig.firmware_protocol.simpiece.instrument import InstrumentSettings
from taprig.schema import records

from ..conftest import LoopThread, ServedRig
from .pg import PgServer, cluster_folder

_numbers = itertools.count(1)


@pytest.fixture(scope="session")
def pg() -> Iterator[PgServer]:
    server = PgServer(cluster_folder())
    try:
        server.init().start()
        server.roles()
        yield server
    finally:
        server.remove()


@pytest.fixture
def archive_dsn(pg: PgServer) -> str:
    """A new database with the archive's schema; the archiver's DSN (with its password)."""
    dsn = pg.database(f"archive_{next(_numbers)}")
    migrate(dsn)
    return dsn


def serve_rig(folder: Path, name: str) -> ServedRig:
    cfg = load_config(None, [f"store.data_dir={folder}", "store.min_free_mb=1",
                             f"rig.name={name}"])  # fmt: skip
    running = start_rig(cfg, InstrumentSettings(rate_hz=1000.0))
    try:
        auth = Auth(folder, max_failures=10_000)
        service = Service(running, auth)
        return ServedRig(running, service, auth.token, LoopThread(service))
    except BaseException:
        running.close()
        raise


@pytest.fixture
def rigs(tmp_path: Path) -> Iterator[Callable[[int], list[ServedRig]]]:
    """rigs(n): n more rigs served on loopback, named rig-1, rig-2, ...; all stopped after."""
    started: list[ServedRig] = []

    def make(n: int) -> list[ServedRig]:
        for _ in range(n):
            name = f"rig-{len(started) + 1}"
            started.append(serve_rig(tmp_path / name, name))
        return started[-n:]

    try:
        yield make
    finally:
        for r in started:
            r.loop.close()
            r.running.close()


def source(rig: ServedRig, url: str | None = None) -> RigSource:
    return RigSource(url or rig.url, rig.token, rig.running.config.rig.name)


def config(dsn: str, served: list[ServedRig], **kw: float) -> ArchiveConfig:
    """Short long-polls and lock retries, so that stopping and handing over are quick."""
    return ArchiveConfig(dsn, tuple(source(r) for r in served), kw.get("wait_s", 0.5),
                         kw.get("busy_retry_s", 0.2))  # fmt: skip


def follow_once(dsn: str, served: list[ServedRig]) -> Archiver:
    """One pass of an Archiver over `served`, waited for; the Archiver (for its status)."""
    archiver = Archiver(config(dsn, served), once=True).start()
    assert archiver.wait(120), "one pass took more than two minutes"
    return archiver


def until(ready: Callable[[], bool], what: str, timeout: float = 60.0) -> None:
    deadline = time.monotonic() + timeout
    while not ready():
        assert time.monotonic() < deadline, f"timed out waiting for {what}"
        time.sleep(0.05)


def commit_sets(running: RunningRig, test: str, points: int, n_freq: int = 4097,
                seed: int = 5, meta: dict[str, object] | None = None) -> None:  # fmt: skip
    """A test of `points` points, one point set of random arrays each, committed through the
    rig's store as the rig commits (its wire body encoded in the same transaction)."""
    rng = np.random.default_rng(seed)
    grid = [GridPoint(f"P{i}", 0.01 * i, 0.02, 0.0) for i in range(points)]
    running.store.save_test(test, grid, RovingMode.HAMMER, "P0", 3, {"sensor_points": {},
                                                                     **(meta or {})})  # fmt: skip

    def cplx() -> np.ndarray:
        return rng.normal(size=(2, n_freq)) + 1j * rng.normal(size=(2, n_freq))

    for p in grid:
        _commit(running, test, p.label, np.linspace(0.0, 12_800.0, n_freq), cplx(), cplx(),
                rng.uniform(size=(2, n_freq)))  # fmt: skip


def _commit(running: RunningRig, test: str, point: str, freq: np.ndarray, h1: np.ndarray,
            gfx: np.ndarray, coherence: np.ndarray, responses: tuple[str, ...] = ("acc0", "acc1"),
            at: tuple[str, ...] = ("P0", "P0")) -> None:  # fmt: skip
    hit = StoredHit(100, "2026-01-01T00:00:00Z", True, 40.0, 8e-4, (), None)
    running.store.commit_point_set(PointSet(
        test=test, point=point, version=0, roving_mode=RovingMode.HAMMER, drive_point=point,
        response_labels=responses, response_points=at, n_averages=3, freq_hz=freq, h1=h1,
        h2=h1.copy(), coherence=coherence, gff=np.ones(freq.size), gxx=np.abs(h1) ** 2,
        gfx=gfx, hits=(hit,), meta={"exp_tau_s": None, "sample_rate_hz": 25_600.0},
    ))  # fmt: skip


def commit_panel(
    running: RunningRig, test: str, model: ModalModel, meta: dict[str, object]
) -> None:
    """A roving-hammer test of `model` over its whole grid whose H1 is the model's analytic
    accelerance at its sensors (tests/client/analytic.py's construction), coherence 1."""
    freq = np.arange(0.0, 1000.0, 0.25)
    grid = [GridPoint(p, *map(float, model.coords[model.index(p)])) for p in model.grid]
    running.store.save_test(test, grid, RovingMode.HAMMER, model.grid[0], 3,
                            {"sensor_points": dict(model.sensors), **meta})  # fmt: skip
    sensors = tuple(model.sensors)
    at = tuple(model.sensors[s] for s in sensors)
    for p in model.grid:
        h = np.array([accelerance(model, p, a, freq) for a in at])
        _commit(running, test, p, freq, h, h, np.ones(h.shape), sensors, at)


def stiffer(scale: float) -> ModalModel:
    """The demo panel with every natural frequency multiplied by `scale`."""
    panel = demo_panel(1000.0)
    return dataclasses.replace(panel, freqs_hz=panel.freqs_hz * scale)


def rig_bodies(served: ServedRig) -> dict[int, tuple[str, bytes]]:
    """id → (Content-Digest, body) of every point set the rig's store holds."""
    store = served.running.store
    out = {}
    for s in store.list_point_sets():
        got = store.get_wire_body(s.id, *records.READ_VERSIONS)  # as served, whatever schema
        assert got is not None
        out[s.id] = (got[0], bytes(got[1]))
    return out


def is_root() -> bool:
    return os.geteuid() == 0
