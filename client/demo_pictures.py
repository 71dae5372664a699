"""The demo's pictures drawn on two cores, the drawing parts imported while the operator taps.

A whole test's pictures are seconds of matplotlib work each way: the FRF and shape PNGs
(client/plots.py) and the mode GIFs with their sheet (client/view/pictures.py). The demo
draws the GIFs and the sheet in a second process while this one draws the PNGs, which
splits the work about evenly between two cores (5.1 and 6.1 CPU seconds measured). That
process is started, and both import what they draw with, once taprigd runs: during the taps
this process mostly waits for the rig, so the imports (about a second of CPU each) come off
the end of the demo.
"""

from __future__ import annotations

import importlib
import multiprocessing
import threading
from concurrent.futures import Future, ProcessPoolExecutor
from pathlib import Path
from typing import TYPE_CHECKING, Final

from .dataset import TestData

if TYPE_CHECKING:
    from .check import CheckResult

DRAWING_MODULES: Final = ("matplotlib.figure", "matplotlib.backends.backend_agg", "PIL.Image")
WORKER_MODULES: Final = ("taprig.client.modal", "taprig.client.view.pictures")


def _warm() -> None:
    """Import what drawing needs (third-party modules only: the demo's own thread may be
    importing taprig's modules meanwhile)."""
    for name in DRAWING_MODULES:
        try:
            importlib.import_module(name)
        except ImportError:
            return  # no plots extra: the drawing says so when it is asked for


def _warm_worker() -> None:
    """Import what the picture process draws with, taprig's modules as well (nothing else
    imports in that process meanwhile)."""
    _warm()
    for name in WORKER_MODULES:
        importlib.import_module(name)


def _mode_pictures(data: TestData, modes: Path, folder: Path) -> list[Path]:
    """The fitted modes moving (one GIF each) and their sheet (PNG)."""
    from .modal import ModalModel
    from .view.pictures import write_model_pictures

    return write_model_pictures(data, ModalModel.load(modes), folder)


class PictureWorker:
    """A second process for the mode GIFs, made and warmed at once; `close` when done.

    The process is forked here, before this one starts a thread of its own, so the fork
    copies no lock a thread holds (a spawned interpreter would run the caller's main script
    again, and a script without a ``__main__`` guard would start a second demo)."""

    def __init__(self) -> None:
        fork = multiprocessing.get_context("fork")
        self._pool = ProcessPoolExecutor(max_workers=1, mp_context=fork)
        self._pool.submit(_warm_worker)  # with fork, the process starts within submit
        self._imports = threading.Thread(target=_warm, name="taprig-demo-imports", daemon=True)
        self._imports.start()

    def draw(self, data: TestData, checked: CheckResult, modes: Path, folder: Path) -> list[Path]:
        """Every picture of the demo into `folder`: the FRF and shape PNGs, and meanwhile in
        the second process the mode GIFs and the sheet of every mode; in that order.
        ClientError when matplotlib is missing."""
        from .plots import write_plots

        moving: Future[list[Path]] = self._pool.submit(_mode_pictures, data, modes, folder)
        try:
            self._imports.join()
            return [*write_plots(data, checked, folder), *moving.result()]
        finally:
            moving.cancel()

    def close(self) -> None:
        """Stop the second process (a drawing still under way is waited for); idempotent."""
        self._pool.shutdown(wait=True, cancel_futures=True)
