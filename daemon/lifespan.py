"""The daemon's parts, started in order and stopped in reverse: the one place that does it.

    simulated device ─► control port ─► store ─► rig          (`start_rig`: capture, threads)
      ─► auth ─► service ─► run file ─► advertiser ─► notifier  (`lifespan`: the event loop)

`lifespan` is what `taprigd run` uses (daemon/run.py); `start_rig` is its first half, for
tests and tools that want capture without serving. Every part's stop is idempotent; a part
that fails to start stops those already started, in reverse.
"""

from __future__ import annotations

import asyncio
import concurrent.futures
import contextlib
import dataclasses
import logging
import os
from collections.abc import AsyncIterator, Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from . import identity
from .api.gate import Limits
from .auth import Auth
from .config import Config
from .errors import ConfigError, StoreError
from .logrepeat import WINDOW_S, report_folded
from .notify import Notifier
from .private import private_dir
from .rig import Rig
from .rigstate import RigEvent
from .running import RunningRig
from .store import Store
from .supervise import report, status_line
from .wirebody import encode_body

if TYPE_CHECKING:  # the simulator is imported only when a simulated device is configured
    from taprig.firmware_protocol.simpiece import ModalModel
    from taprig.firmware_protocol.simpiece.instrument import InstrumentSettings, SimulatedPiece

    from .advertise import Advertiser
    from .api.service import Service

log = logging.getLogger(__name__)


def start_rig(
    config: Config,
    instrument_settings: InstrumentSettings | None = None,
    model: ModalModel | None = None,
    control_port: int | None = None,
    sim_speed: float = 1.0,
) -> RunningRig:
    """Start the capture parts the configuration names, in order, and start capturing.

    instrument_settings, model: for a simulated device, how to build it (default: the demo panel).
    control_port: serve the simulated device's control interface on this loopback port (0: any).
    sim_speed: simulated seconds per wall second of a simulated device (1: real time).
    """
    usable_data_dir(config)
    if control_port is not None and not config.device.is_simulated:
        raise ConfigError("--sim-control needs a simulated device (device.url=simulated...)")
    if sim_speed != 1.0 and not config.device.is_simulated:
        raise ConfigError("--sim-speed needs a simulated device (device.url=simulated...)")
    with contextlib.ExitStack() as stack:
        instrument = control = None
        url = config.device.url
        if config.device.is_simulated:
            instrument = _open_instrument(config, instrument_settings, model, sim_speed)
            stack.callback(instrument.close)
            url = instrument.url
            if control_port is not None:
                from taprig.firmware_protocol.simpiece.control import ControlServer

                control = ControlServer(instrument, port=control_port).start()
                stack.callback(control.close)
        store = Store(config.store.data_dir, body_encoder=encode_body)
        stack.callback(store.close)
        rig = Rig(config, store, url=url)
        stack.callback(rig.close)
        rig.start()
        return RunningRig(config, store, rig, instrument, control, stack.pop_all())
    raise AssertionError("unreachable")  # mypy: an ExitStack may swallow exceptions


def usable_data_dir(config: Config) -> None:
    """Make store.data_dir if missing; StoreError naming the key when it cannot be made or
    written (checked first, so no part starts only to fail on it)."""
    folder = config.store.data_dir
    hint = ("; set store.data_dir (or TAPRIG_DATA_DIR) to a folder you may write, "
            "or run as the user the install made for it")  # fmt: skip
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        reason = exc.strerror or str(exc)
        raise StoreError(f"store.data_dir = {folder}: cannot be made ({reason}){hint}") from None
    if not os.access(folder, os.W_OK | os.X_OK):
        raise StoreError(f"store.data_dir = {folder}: not writable by this user{hint}")


def _open_instrument(
    config: Config, settings: InstrumentSettings | None, model: ModalModel | None, speed: float
) -> SimulatedPiece:
    from taprig.firmware_protocol.simpiece.instrument import InstrumentSettings, open_simulated

    url = config.device.url
    transport = "tcp" if url == "simulated:tcp" else "pty"
    # A board printing text lines manages a few kHz, not the binary link's 51.2 kHz.
    if settings is None:
        text = url == "simulated:text"
        settings = (
            InstrumentSettings(output="text", rate_hz=5_000.0) if text else InstrumentSettings()
        )
    if speed != 1.0:
        settings = dataclasses.replace(settings, speed=speed)
    # Behind a stable name in the data folder, as udev gives a USB device, so the link finds
    # it again after an unplug.
    link = str(config.store.data_dir / "sim-tty") if transport == "pty" else None
    private_dir(config.store.data_dir)
    instrument = open_simulated(transport, link=link, settings=settings, model=model)
    log.info("simulated test piece on %s", instrument.url)
    return instrument


@dataclass
class Daemon:
    """Every part of a serving daemon, as `lifespan` started them."""

    running: RunningRig
    auth: Auth
    service: Service
    advertiser: Advertiser | None
    notifier: Notifier


@contextlib.asynccontextmanager
async def lifespan(
    cfg: Config,
    *,
    control_port: int | None = None,
    prepare: Callable[[RunningRig], None] | None = None,
    notifier: Notifier | None = None,
    sim_speed: float = 1.0,
) -> AsyncIterator[Daemon]:
    """Every part, in order: the capture parts (`start_rig`), then auth, service, run file,
    advertiser, notifier; on leaving, all of them stop in reverse.

    Entered inside the event loop. control_port: as for `start_rig`. prepare: run on a worker
    thread once the rig runs and before the service opens (e.g. to open a test), so that a
    tool that finds the run file finds the rig ready. notifier: where readiness and status go
    (default: $NOTIFY_SOCKET, if set). sim_speed: as for `start_rig`.
    """
    from .api.service import Service

    async with contextlib.AsyncExitStack() as stack:
        running = await asyncio.to_thread(start_rig, cfg, None, None, control_port,
                                          sim_speed)
        stack.push_async_callback(asyncio.to_thread, running.close)  # joins threads: off the loop
        if prepare is not None:
            await asyncio.to_thread(prepare, running)
        data_dir = cfg.store.data_dir
        auth = Auth(data_dir)
        rig_id = identity.rig_id(data_dir)
        s = cfg.service
        service = Service(running, auth, host=s.bind, port=s.port, rig_id=rig_id,
                          max_body=s.max_request_kb * 1024, limits=_limits(cfg),
                          body_timeout_s=s.body_timeout_s)  # fmt: skip
        stack.push_async_callback(service.async_close)
        await service.async_start()
        stack.callback(identity.remove_run_file, data_dir)
        control_port = running.control.port if running.control is not None else None
        identity.write_run_file(data_dir, cfg.service.bind, service.port, control_port)
        advertiser = await _advertise(running, rig_id, service.port, stack)
        notify = notifier if notifier is not None else Notifier()
        stack.callback(notify.close)
        stack.callback(notify.stopping)
        notify.ready(status_line(running.rig.view()))
        if notify.active:
            reporter = asyncio.create_task(report(running.rig, notify))
            stack.push_async_callback(_cancelled, reporter)
        stack.push_async_callback(_cancelled, asyncio.create_task(_report_folded()))
        yield Daemon(running, auth, service, advertiser, notify)


def _limits(cfg: Config) -> Limits:
    """The service's connection limits from the [service] settings."""
    s = cfg.service
    return Limits(total=s.max_connections, per_address=s.connections_per_address,
                  header_s=s.header_timeout_s)  # fmt: skip


async def _advertise(
    running: RunningRig, rig_id: str, port: int, stack: contextlib.AsyncExitStack
) -> Advertiser | None:
    """Announce the rig on the LAN (if configured) and keep the announcement in step."""
    cfg = running.config
    if not cfg.service.advertise:
        return None
    from zeroconf import InterfaceChoice

    from .advertise import Advertiser, Interfaces

    where = cfg.service.announce_addresses
    interfaces: Interfaces = where if where else InterfaceChoice.All
    advertiser = Advertiser(cfg.rig.name, rig_id, port, interfaces=interfaces)
    stack.push_async_callback(advertiser.async_close)
    name = await advertiser.async_start(**_announced(running.rig))
    log.info("announced on the LAN as %s", name)
    _follow(running.rig, advertiser, asyncio.get_running_loop())
    # The state may have changed while the name was being probed for (a second or two).
    await advertiser.async_update(**_announced(running.rig))
    return advertiser


def _announced(rig: Rig) -> dict[str, Any]:
    """What the announcement carries: whether the rig is armed, and its test's name."""
    view = rig.view()
    return {"running": view.armed, "test": view.plan.name if view.plan else None}


def _follow(rig: Rig, advertiser: Advertiser, loop: asyncio.AbstractEventLoop) -> None:
    """Keep the TXT record's running flag and test name in step with the rig."""

    def on_event(event: RigEvent) -> None:  # on the rig's thread: its view is current
        if event.kind != "cursor":
            return
        armed = bool(event.data.get("armed", rig.view().armed))
        test = event.data.get("test")
        coro = advertiser.async_update(running=armed, test=test if isinstance(test, str) else None)
        future = asyncio.run_coroutine_threadsafe(coro, loop)
        future.add_done_callback(_log_failure)

    rig.subscribe(on_event)


def _log_failure(future: concurrent.futures.Future[None]) -> None:
    if future.cancelled():
        return
    exc = future.exception()
    if exc is not None:
        log.warning("could not update the announcement: %s", exc)


async def _report_folded() -> None:
    """Once a minute, the counts of log lines folded by the log's repeat filter."""
    while True:
        await asyncio.sleep(WINDOW_S)
        report_folded()


async def _cancelled(task: asyncio.Task[None]) -> None:
    task.cancel()
    with contextlib.suppress(asyncio.CancelledError):
        await task
