"""Modes from a test: pLSCF poles, stabilization diagram, LSFD shapes, quality evidence.

Pure numpy/scipy (no HTTP, SQLite or plotting). ``fit(data) -> ModalModel``; one method per
module: plscf.py, stability.py, lsfd.py, quality.py; the record in model.py.
"""

from __future__ import annotations

from .fit import fit
from .model import ModalModel

__all__ = ["ModalModel", "fit"]
