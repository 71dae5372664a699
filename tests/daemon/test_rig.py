"""The whole capture pipeline on the simulated test piece over a real pty, into a real store."""

from __future__ import annotations

import dataclasses
import math
import queue
import time
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pytest

from taprig.daemon.config import load_config
from taprig.daemon.errors import SessionError
from taprig.daemon.lifespan import RunningRig, start_rig
from taprig.daemon.records import GridPoint, RovingMode
from taprig.daemon.rigstate import RigEvent
from taprig.firmware_protocol.simpiece import accelerance, demo_panel
from taprig.firmware_protocol.simpiece.instrument import SimulatedPiece

# The demo panel with 4 % damping: it rings down in a fraction of a second, so the
# simulated operator need not wait long between taps for the previous one to die away.
DAMPED = dataclasses.replace(demo_panel(), damping_ratio=np.full(demo_panel().n_modes, 0.04))
PAUSE_S = 0.25  # the operator's pause between taps: e^(-0.04·2π·66·0.25) ≈ 1.6 %


@pytest.fixture
def running(tmp_path: Path) -> Iterator[RunningRig]:
    cfg = load_config(
        None,
        [f"store.data_dir={tmp_path}", "capture.block=8192", "capture.averages=3",
         "store.min_free_mb=1"],
    )  # fmt: skip
    r = start_rig(cfg, model=DAMPED)
    try:
        yield r
    finally:
        r.close()


class Events:
    def __init__(self, r: RunningRig) -> None:
        self.q: queue.Queue[RigEvent] = queue.Queue()
        r.rig.subscribe(self.q.put)

    def clear(self) -> None:
        while not self.q.empty():
            self.q.get_nowait()

    def next(self, kind: str, timeout: float = 10.0) -> RigEvent:
        deadline = time.monotonic() + timeout
        while True:
            left = deadline - time.monotonic()
            if left <= 0:
                raise AssertionError(f"no {kind} event in {timeout} s")
            try:
                ev = self.q.get(timeout=left)
            except queue.Empty:
                continue
            if ev.kind == kind:
                return ev


def grid_of(piece: SimulatedPiece, labels: list[str]) -> list[GridPoint]:
    m = piece.model
    return [GridPoint(lab, *map(float, m.coords[m.index(lab)])) for lab in labels]


def wait_info(r: RunningRig) -> None:
    deadline = time.monotonic() + 10
    while r.rig.view().info is None:
        assert time.monotonic() < deadline, "device never identified itself"
        time.sleep(0.01)


def wait_streamed(r: RunningRig, index: int, timeout: float = 10.0) -> None:
    """Until the daemon has decoded the device's samples up to `index` (its sample clock)."""
    deadline = time.monotonic() + timeout
    while r.rig.view().samples < index:
        assert time.monotonic() < deadline, f"the stream never reached sample {index}"
        time.sleep(0.01)


def tap_and_wait(r: RunningRig, ev: Events, point: str, **kw: object) -> RigEvent:
    """The operator's pause, PAUSE_S on the device's own sample clock (not the wall clock,
    which a loaded machine stretches); then one tap and the hit event it caused."""
    operator_pause(r)
    ev.clear()
    assert r.instrument is not None
    assert r.instrument.tap(point, **kw) is not None  # type: ignore[arg-type]
    return ev.next("hit")


def operator_pause(r: RunningRig) -> None:
    """Until the daemon has decoded PAUSE_S more of the device's samples than it has now."""
    piece = r.instrument
    assert piece is not None
    wait_streamed(r, r.rig.view().samples + math.ceil(PAUSE_S * piece.rate_hz))


def test_roving_hammer_test_end_to_end(running: RunningRig) -> None:
    r, piece = running, running.instrument
    assert piece is not None
    ev = Events(r)
    wait_info(r)
    labels = ["A1", "B3", "C4"]
    r.rig.create_test("panel-1", grid_of(piece, labels), RovingMode.HAMMER, reference="B3",
                      sensor_points=piece.model.sensor_places())  # fmt: skip
    with pytest.raises(SessionError, match="no test is selected"):
        r.rig.arm()
    r.rig.select_test("panel-1")
    r.rig.arm()
    for label in labels:
        assert r.rig.snapshot()["point"] == label
        for k in range(3):
            if label == "B3" and k == 1:
                hit = tap_and_wait(r, ev, label, double_hit=True)
                assert not hit.data["accepted"]
                assert hit.data["rejections"][0][0] == "double_hit"
            hit = tap_and_wait(r, ev, label, force_n=20.0 + 5 * k)
            assert hit.data["accepted"], hit.data["rejections"]
        done = ev.next("completed")
        assert done.data["point"] == label and done.data["version"] == 1
    sets = r.store.list_point_sets(test="panel-1")
    assert [s.point for s in sets] == labels
    b3 = r.store.get_point_set(sets[1].id, with_hits=True)
    assert b3.n_averages == 3
    assert b3.response_labels == ("acc1", "acc2") and b3.response_points == ("B3", "0.467,0.328,0")
    assert [h.accepted for h in b3.hits].count(False) == 1
    assert b3.hits[0].data is not None and b3.hits[0].data.shape == (3, 8192)
    assert b3.meta["device"]["id"] == "SIMULATED-PANEL"
    assert np.isfinite(b3.meta["exp_tau_s"])
    assert b3.h1.shape == (2, 4097)
    # coherence: clean taps on a noiseless-ish panel are coherent at the first mode
    f1 = int(np.argmin(np.abs(b3.freq_hz - piece.model.freqs_hz[0])))
    assert b3.coherence[0, f1] > 0.99
    # The last point in: the test is complete and the rig disarmed itself.
    assert ev.next("test_complete").data["points"] == 3 and not r.rig.view().armed
    # measure B3 again, deliberately: a new version, the old one kept
    r.rig.measure_again("B3")
    r.rig.arm()
    for _ in range(3):
        tap_and_wait(r, ev, "B3", force_n=30.0)
    again = ev.next("completed")
    assert again.data["version"] == 2
    assert len(r.store.list_point_sets(test="panel-1")) == 4
    assert r.store.integrity_check() == "ok"
    assert r.rig.view().commit_latency_s


def test_disarmed_rig_stores_nothing(running: RunningRig) -> None:
    r, piece = running, running.instrument
    assert piece is not None
    wait_info(r)
    r.rig.create_test("idle", grid_of(piece, ["A1"]))
    r.rig.select_test("idle")
    piece.tap("A1")
    deadline = time.monotonic() + 5
    while r.rig.view().hits_seen == 0:
        assert time.monotonic() < deadline
        time.sleep(0.01)
    assert r.rig.view().hits_while_disarmed == 1
    assert r.store.list_point_sets() == []


def small_rig(tmp_path: Path, *settings: str) -> RunningRig:
    """A rig on the damped panel: 4096-sample blocks, two averages, `settings` added."""
    cfg = load_config(None, [f"store.data_dir={tmp_path}", "capture.block=4096",
                             "capture.averages=2", "store.min_free_mb=1", *settings])  # fmt: skip
    return start_rig(cfg, model=DAMPED)


def test_operator_accept_policy(tmp_path: Path) -> None:
    r = small_rig(tmp_path, "capture.accept=operator")
    try:
        assert r.instrument is not None
        ev = Events(r)
        wait_info(r)
        r.rig.create_test("manual", grid_of(r.instrument, ["D2"]))
        r.rig.select_test("manual")
        r.rig.arm()
        hit = tap_and_wait(r, ev, "D2")
        assert hit.data["waiting"] and not hit.data["counted"]
        assert r.rig.reject().averages == 0
        for _ in range(2):
            tap_and_wait(r, ev, "D2")
            assert r.rig.accept().counted
        ev.next("completed")
        (ps,) = r.store.list_point_sets(test="manual")
        full = r.store.get_point_set(ps.id)
        assert [h.accepted for h in full.hits] == [False, True, True]
        assert full.hits[0].findings[-1].code == "operator"
    finally:
        r.close()


def test_roving_sensor_mode(tmp_path: Path) -> None:
    """Hammer fixed at the reference B3, one accelerometer moved from point to point.

    Reference: by Maxwell–Betti reciprocity the FRF from B3 to P equals that from P to B3
    (Ewins, Modal Testing, 2000, §2), so at the first mode |H1| matches the analytic
    accelerance of the model from B3 to P.
    """
    cfg_file = tmp_path / "rove.toml"
    cfg_file.write_text(
        '[[channels]]\nindex = 0\nrole = "force"\nlabel = "hammer"\nsensitivity = 2.25\n'
        'unit = "mV/N"\n[[channels]]\nindex = 1\nrole = "response"\nlabel = "rover"\n'
        'sensitivity = 1.02\nunit = "mV/(m/s^2)"\n'
    )
    cfg = load_config(cfg_file, [f"store.data_dir={tmp_path}", "capture.block=8192",
                                 "capture.averages=2", "store.min_free_mb=1"])  # fmt: skip
    r = start_rig(cfg, model=DAMPED)
    try:
        piece = r.instrument
        assert piece is not None
        ev = Events(r)
        wait_info(r)
        r.rig.create_test("rove", grid_of(piece, ["A1", "B3", "C4"]), RovingMode.SENSOR, "B3")
        r.rig.select_test("rove")
        r.rig.arm()
        for label in ["A1", "B3", "C4"]:
            assert r.rig.snapshot()["point"] == label
            piece.move_sensor("acc1", label)  # the operator moves the accelerometer
            for _ in range(2):
                assert tap_and_wait(r, ev, "B3").data["counted"]
            assert ev.next("completed").data["point"] == label
        for s in r.store.list_point_sets(test="rove"):
            ps = r.store.get_point_set(s.id)
            assert ps.drive_point == "B3" and ps.response_points == (s.point,)
            assert ps.response_labels == ("rover",)
            tau = ps.meta["exp_tau_s"]
            f1 = int(np.argmax(np.abs(ps.h1[0, : int(150 / ps.freq_hz[1])])))
            ref = accelerance(DAMPED, "B3", s.point, ps.freq_hz[f1 : f1 + 1], 1.0 / tau)
            assert abs(ps.h1[0, f1]) == pytest.approx(abs(ref[0]), rel=0.02)
    finally:
        r.close()


def test_text_device_captures(tmp_path: Path) -> None:
    """A board printing lines of volts: the same pipeline, rate from its "# rate=" comment."""
    cfg = load_config(None, [f"store.data_dir={tmp_path}", "device.url=simulated:text",
                             "device.format=text", "capture.block=2048", "capture.averages=2",
                             "store.min_free_mb=1", "capture.pretrigger=64"])  # fmt: skip
    r = start_rig(cfg, model=DAMPED)
    try:
        piece = r.instrument
        assert piece is not None
        ev = Events(r)
        wait_info(r)
        assert r.rig.view().info is not None and r.rig.view().info.rate_hz == 5000.0
        r.rig.create_test("txt", grid_of(piece, ["E6"]))
        r.rig.select_test("txt")
        r.rig.arm()
        for _ in range(2):
            hit = tap_and_wait(r, ev, "E6", width_s=0.002)
            assert hit.data["counted"], hit.data["rejections"]
        assert ev.next("completed").data["point"] == "E6"
    finally:
        r.close()
