"""The demo's fitted modes beside the simulated panel's truth: one line per fitted mode.

Columns: true f, fitted f and their relative error; true ζ, fitted ζ (window removed);
MAC between the fitted shape and the true one over the grid (Allemang & Brown, 1982).
Each fitted mode is set beside the true mode nearest in frequency. Where the truth has two
modes at one frequency (a repeated root), the data fix only their plane, so the MAC is
taken against the fitted shape's projection on that plane.
"""

from __future__ import annotations

import numpy as np

from taprig.firmware_protocol.simpiece import ModalModel as Truth

from .modal.model import ModalModel
from .modal.quality import mac

__all__ = ["truth_table"]


def truth_table(model: ModalModel, truth: Truth) -> list[str]:
    """The table as lines of text (see the module docstring)."""
    phi = truth.shapes_at(list(model.point))
    f_true = truth.freqs_hz
    lines = [
        f"  {'#':>3} {'true f':>9} {'fitted f':>9} {'error':>8} {'true zeta%':>10} "
        f"{'fit zeta%':>9} {'MAC':>7}  flags",
    ]
    for k in range(model.n_modes):
        j = int(np.argmin(np.abs(f_true - model.freq_hz[k])))
        same = np.flatnonzero(np.abs(f_true / f_true[j] - 1.0) < 1e-9)
        plane = phi[:, same]
        proj = plane @ np.linalg.lstsq(plane, model.shape[k], rcond=None)[0]
        value = float(mac(model.shape[k], proj)[0, 0])
        err = 100.0 * (model.freq_hz[k] / f_true[j] - 1.0)
        lines.append(
            f"  {k + 1:>3} {f_true[j]:9.2f} {model.freq_hz[k]:9.2f} {err:+7.3f}% "
            f"{100.0 * truth.damping_ratio[j]:10.3f} {100.0 * model.damping_ratio[k]:9.3f} "
            f"{value:7.4f}  " + (" ".join(model.flags[k]) or "ok")
        )
    return lines
