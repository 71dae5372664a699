"""A running rig's capture parts, as `daemon/lifespan.py` started them, for the parts that
serve it (the HTTP service, the command line)."""

from __future__ import annotations

import contextlib
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

from .config import Config
from .rig import Rig
from .store import Store

if TYPE_CHECKING:  # the simulator is imported only when a simulated device is configured
    from taprig.firmware_protocol.simpiece.control import ControlServer
    from taprig.firmware_protocol.simpiece.instrument import SimulatedPiece


@dataclass
class RunningRig:
    """The capture parts of a running daemon; `close()` stops them in reverse (idempotent)."""

    config: Config
    store: Store
    rig: Rig
    instrument: SimulatedPiece | None = None
    control: ControlServer | None = None
    _stack: contextlib.ExitStack = field(default_factory=contextlib.ExitStack, repr=False)

    def close(self) -> None:
        self._stack.close()  # an ExitStack runs its callbacks once
