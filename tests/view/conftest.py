"""Fixtures for the view: the simulated panel's analytic test and its known modes.

`known_modes` is the panel's own modal model (Leissa's simply supported plate, as the
simulated test piece simulates it) passed through `from_model`, the adapter the modal fit
will use, with a stabilization diagram made of the true poles (stable at every order) and
one drifting spurious pole per order (not stable): a diagram whose columns are known.
"""

from __future__ import annotations

from dataclasses import dataclass
from types import SimpleNamespace

import numpy as np
import pytest

from taprig.client.dataset import TestData
from taprig.client.view.modes import ModeSet, auto_mac, from_model
from taprig.daemon.records import GridPoint, PointSet, RovingMode, StoredHit
from taprig.daemon.running import RunningRig
from taprig.firmware_protocol.simpiece import ModalModel, demo_panel
from tests.client.analytic import analytic_test_data
from tests.client.conftest import places, served  # noqa: F401  (fixtures for the command tests)

PANEL = demo_panel(2000.0)
FREQ = np.arange(0.0, 2000.0 + 1e-9, 0.5)  # Hz
TAU_S = 0.5


@dataclass(frozen=True)
class Known:
    model: ModalModel
    data: TestData
    modes: ModeSet


def truth_modes(model: ModalModel, data: TestData, orders: range = range(4, 31, 2)) -> ModeSet:
    """The model's modes as the modal fit would hand them over (see the module docstring)."""
    rows = [model.index(p) for p in data.points]
    shape = model.shapes[rows].T.astype(np.complex128)  # (M, P)
    spurious = float(model.freqs_hz.mean())
    stab = [
        SimpleNamespace(order=o, freq_hz=np.append(model.freqs_hz, spurious + 7.0 * o),
                        damping=np.append(model.damping_ratio, 0.05),
                        stable=np.append(np.ones(model.freqs_hz.size, bool), False))
        for o in orders
    ]  # fmt: skip
    fitted = SimpleNamespace(
        freq_hz=model.freqs_hz, damping_ratio=model.damping_ratio,
        mpc=np.ones(model.freqs_hz.size), shape=shape, point=data.points, mac=auto_mac(shape),
        flags=[["ok"]] * model.freqs_hz.size, stabilization=stab,
    )  # fmt: skip
    return from_model(fitted, data)


@pytest.fixture(scope="session")
def known() -> Known:
    data = analytic_test_data(PANEL, FREQ, TAU_S)
    return Known(PANEL, data, truth_modes(PANEL, data))


def commit_analytic(running: RunningRig, data: TestData) -> None:
    """`data` committed through the rig's store as the rig commits point sets, one per row
    (Gfx = H1·Gff, the cross spectrum H1 comes from), so a client can pull and mirror it."""
    grid = [GridPoint(p, *map(float, xyz), d) for p, *xyz, d in data.grid]
    store = running.store
    store.save_test(data.test, grid, RovingMode.HAMMER, data.reference, 5, {"sensor_points": {}})
    hits = (StoredHit(100, "2026-12-01T09:00:00Z", True, 40.0, 8e-4, (), None),)
    for i, p in enumerate(data.points):
        store.commit_point_set(PointSet(
            test=data.test, point=p, version=0, roving_mode=RovingMode.HAMMER, drive_point=p,
            response_labels=data.responses, response_points=data.response_points[i],
            n_averages=5, freq_hz=data.freq_hz, h1=data.h1[i], h2=data.h2[i],
            coherence=data.coherence[i], gff=data.gff[i], gxx=data.gxx[i],
            gfx=data.h1[i] * data.gff[i], hits=hits, meta={"exp_tau_s": data.exp_tau_s,
                                                          "sample_rate_hz": 2 * data.freq_hz[-1]},
        ))  # fmt: skip
