"""The daemon's event loop: HTTP service and mDNS advertiser around a running rig.

Started in order (rig → service → advertiser) and stopped in reverse. The rig
and the store keep their own threads; this loop only serves sockets, and tells
the service manager (daemon/notify.py) when it is ready, how the rig is, and,
while both this loop and the rig's thread go round, that it is alive.
"""

from __future__ import annotations

import asyncio
import concurrent.futures
import contextlib
import json
import logging
import os
import signal
import time
from collections.abc import Awaitable, Callable
from pathlib import Path
from typing import Any

from zeroconf import InterfaceChoice

from .advertise import Advertiser, Interfaces, rig_id
from .auth import Auth
from .notify import Notifier
from .rig import Rig, RigEvent
from .runner import RunningRig
from .service import Service

log = logging.getLogger(__name__)

RUN_FILE = "run.json"
"""Written in the state folder while the service listens: where a local tool finds the rig."""
STATUS_S = 1.0  # seconds between status updates to the service manager (sent when changed)


async def serve(
    running: RunningRig,
    *,
    duration_s: float = 0.0,
    tick: Callable[[], Awaitable[None]] | None = None,
    tick_s: float = 1.0,
    control_port: int | None = None,
    notifier: Notifier | None = None,
) -> None:
    """Serve until SIGTERM/SIGINT (or `duration_s`), calling `tick` every `tick_s` seconds.

    control_port: the loopback port of the virtual instrument's control interface, if one
    runs; recorded in the run file (`write_run_file`).
    notifier: where readiness and status go (default: $NOTIFY_SOCKET, if set).
    """
    notify = notifier if notifier is not None else Notifier()
    cfg = running.config
    auth = Auth(cfg.store.data_dir)
    identity = rig_id(cfg.store.data_dir)
    service = Service(
        running, auth, host=cfg.service.bind, port=cfg.service.port, rig_id=identity,
        max_body=cfg.service.max_request_kb * 1024,
    )  # fmt: skip
    stop = asyncio.Event()
    loop = asyncio.get_running_loop()
    for sig in (signal.SIGTERM, signal.SIGINT):
        loop.add_signal_handler(sig, stop.set)
    advertiser: Advertiser | None = None
    reporter: asyncio.Task[None] | None = None
    try:
        await service.async_start()
        write_run_file(cfg.store.data_dir, cfg.service.bind, service.port, control_port)
        if cfg.service.advertise:
            where = cfg.service.announce_addresses
            interfaces: Interfaces = where if where else InterfaceChoice.All
            advertiser = Advertiser(cfg.rig.name, identity, service.port, interfaces=interfaces)
            name = await advertiser.async_start(**_state(running))
            log.info("announced on the LAN as %s", name)
            _follow_state(running, advertiser, loop)
            # The state may have changed while the name was being probed for (a second or two).
            await advertiser.async_update(**_state(running))
        notify.ready(status_line(running.rig))
        if notify.active:
            reporter = asyncio.create_task(_report(running.rig, notify))
        await _wait(stop, duration_s, tick, tick_s)
    finally:
        notify.stopping()
        if reporter is not None:
            reporter.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await reporter
        with contextlib.suppress(FileNotFoundError):
            (cfg.store.data_dir / RUN_FILE).unlink()
        if advertiser is not None:
            await advertiser.async_close()
        await service.async_close()
        for sig in (signal.SIGTERM, signal.SIGINT):
            loop.remove_signal_handler(sig)
        notify.close()


def write_run_file(state_dir: Path, bind: str, port: int, control_port: int | None) -> None:
    """Record where this process serves, atomically: ``{"pid", "bind", "port", "control_port"}``.

    Local tools (the demo, `taprigd status`, tests) read it instead of parsing the log; it is
    removed when the service stops, and a stale one names a pid that no longer runs.
    """
    record = {"pid": os.getpid(), "bind": bind, "port": port, "control_port": control_port}
    tmp = state_dir / (RUN_FILE + ".tmp")
    tmp.write_text(json.dumps(record) + "\n", encoding="utf-8")
    os.replace(tmp, state_dir / RUN_FILE)


async def _wait(
    stop: asyncio.Event,
    duration_s: float,
    tick: Callable[[], Awaitable[None]] | None,
    tick_s: float,
) -> None:
    loop = asyncio.get_running_loop()
    end = loop.time() + duration_s if duration_s > 0 else float("inf")
    while not stop.is_set() and loop.time() < end:
        with contextlib.suppress(TimeoutError):
            await asyncio.wait_for(stop.wait(), timeout=min(tick_s, max(end - loop.time(), 0)))
        if tick is not None and not stop.is_set():
            await tick()


def status_line(rig: Rig) -> str:
    """A short state for the service manager, e.g. "armed, test bracket-1 at B3, device
    connected"."""
    what = "paused: disk low" if rig.waiting_for_room else "armed" if rig.armed else "idle"
    session = rig.session
    test = f", test {session.plan.name} at {session.cursor}" if session else ""
    return f"{what}{test}, device {rig.link_state.value}"


async def _report(rig: Rig, notify: Notifier) -> None:
    """Status every STATUS_S; WATCHDOG=1 at least every half watchdog timeout while the rig's
    thread goes round. Runs on the event loop, so a stuck loop stops the pings too."""
    period = min(notify.watchdog_s or STATUS_S, STATUS_S)
    while True:
        notify.status(status_line(rig))
        if notify.watchdog_s is not None:
            stuck_s = time.monotonic() - rig.beat
            if stuck_s < notify.watchdog_s:
                notify.watchdog()
            else:  # no ping: the manager restarts the daemon, which is the point
                log.error("the rig's thread has not gone round for %.1f s", stuck_s)
        await asyncio.sleep(period)


def _state(running: RunningRig) -> dict[str, Any]:
    """What the announcement carries: whether the rig is armed, and its test's name."""
    session = running.rig.session
    return {"running": running.rig.armed, "test": session.plan.name if session else None}


def _follow_state(
    running: RunningRig, advertiser: Advertiser, loop: asyncio.AbstractEventLoop
) -> None:
    """Keep the TXT record's running flag and test name in step with the rig."""

    def on_event(event: RigEvent) -> None:
        if event.kind != "cursor":
            return
        armed = bool(event.data.get("armed", running.rig.armed))
        test = event.data.get("test")
        coro = advertiser.async_update(running=armed, test=test if isinstance(test, str) else None)
        future = asyncio.run_coroutine_threadsafe(coro, loop)
        future.add_done_callback(_log_failure)

    running.rig.subscribe(on_event)


def _log_failure(future: concurrent.futures.Future[None]) -> None:
    exc = future.exception()
    if exc is not None:
        log.warning("could not update the announcement: %s", exc)
