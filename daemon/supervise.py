"""What the service manager is told while the daemon runs: a short status line and, while
the rig's processing thread goes round, the watchdog ping (systemd's protocol: daemon/notify.py).
"""

from __future__ import annotations

import asyncio
import logging
import time
from typing import Final

from .notify import Notifier
from .rig import Rig
from .rigstate import RigView

log = logging.getLogger(__name__)

STATUS_S: Final = 1.0  # seconds between status updates to the service manager (sent when changed)


def status_line(view: RigView) -> str:
    """A short state for the service manager, e.g. "armed, test bracket-1 at B3, device
    connected"."""
    what = "paused: disk low" if view.waiting_for_room else "armed" if view.armed else "idle"
    test = f", test {view.plan.name} at {view.point}" if view.plan is not None else ""
    return f"{what}{test}, device {view.link_state.value}"


async def report(rig: Rig, notify: Notifier) -> None:
    """Status every STATUS_S; WATCHDOG=1 at least every half watchdog timeout while the rig's
    thread goes round. Runs on the event loop, so a stuck loop stops the pings too."""
    period = min(notify.watchdog_s or STATUS_S, STATUS_S)
    while True:
        notify.status(status_line(rig.view()))
        if notify.watchdog_s is not None:
            # `beat` is one float the rig's thread stores each turn: a torn read cannot happen.
            stuck_s = time.monotonic() - rig.beat
            if stuck_s < notify.watchdog_s:
                notify.watchdog()
            else:  # no ping: the manager restarts the daemon, which is the point
                log.error("the rig's thread has not gone round for %.1f s", stuck_s)
        await asyncio.sleep(period)
