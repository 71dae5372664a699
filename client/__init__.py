"""taprig workstation client: discover rigs, pull point sets into a local mirror, export.

The Python API (names load on first use, so the command line starts quickly)::

    from taprig.client import Mirror
    with Mirror.open_rig("shop-rig") as mirror:   # a paired rig's mirror, by name or id
        data = mirror.load("bracket-1")           # TestData: arrays and metadata of one test
        print(data.freq_hz.shape, data.h1.shape)  # (F,), (points, responses, F)
    from taprig.client import fit
    model = fit(data)                             # ModalModel: freq_hz, damping_ratio, shape, ...

`Mirror` (mirror.py), `TestData` (dataset.py), `RigClient` (remote.py), `fit` and
`ModalModel` (modal/: pLSCF, stabilization, LSFD); pulls with
`taprig.client.pull.pull(client, mirror)`.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

__all__ = ["Mirror", "ModalModel", "RigClient", "TestData", "fit"]

if TYPE_CHECKING:
    from .dataset import TestData
    from .mirror import Mirror
    from .modal import ModalModel, fit
    from .remote import RigClient

_WHERE = {"Mirror": "mirror", "TestData": "dataset", "RigClient": "remote", "fit": "modal",
          "ModalModel": "modal"}  # fmt: skip


def __getattr__(name: str) -> Any:
    if name in _WHERE:
        import importlib

        return getattr(importlib.import_module(f".{_WHERE[name]}", __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
