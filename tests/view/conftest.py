"""Fixtures for the view: the virtual panel's analytic test and its known modes.

`known_modes` is the panel's own modal model (Leissa's simply supported plate, as the
virtual instrument simulates it) passed through `from_model`, the adapter the modal fit
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
from taprig.firmware_protocol.virtual import ModalModel, demo_panel
from tests.client.analytic import analytic_test_data

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
