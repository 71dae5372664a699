"""`taprigd run`: start every part (daemon/lifespan.py), open the test, serve until told to stop.

Stops on SIGTERM or SIGINT, or after `RunOptions.duration` seconds. With a simulated device a
simulated operator may tap every few seconds (`sim_taps`), as a hand would.
"""

from __future__ import annotations

import asyncio
import contextlib
import functools
import json
import logging
import signal
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

from . import placement
from .capture.link import LinkState
from .config import Config
from .errors import GridError, SessionError
from .eventtext import event_text
from .grid import MAX_POINTS, import_grid_csv, outline_beside, read_outline
from .lifespan import lifespan
from .records import GridPoint, RovingMode
from .rig import Rig
from .rigstate import RigEvent
from .running import RunningRig

log = logging.getLogger("taprig.daemon")

SETTLE_S = 3.0  # longest the service waits for `--test` to open on a device that is there, s


@dataclass(frozen=True)
class RunOptions:
    """What `taprigd run` was asked beyond the configuration (its command-line options)."""

    test: str | None = None
    grid: Path | None = None
    roving: RovingMode = RovingMode.HAMMER
    reference: str | None = None
    duration: float = 0.0
    sim_taps: float = 0.0
    sim_double_hits: float = 0.0
    truth: Path | None = None
    json_events: bool = False
    sim_control: int | None = None
    outline: Path | None = None  # default: <grid>.outline beside the grid, when there is one
    sim_speed: float = 1.0  # simulated seconds per wall second (simulated device only)
    sensor_at: tuple[tuple[str, str, str], ...] = ()  # (label, where, direction) per --sensor-at


async def run(cfg: Config, opt: RunOptions) -> None:
    """Run the daemon until SIGTERM/SIGINT (or `opt.duration` seconds); every part stops on
    the way out, also on an error. The signals are taken first: one that arrives while the
    parts start ends the run as soon as they have."""
    stop = asyncio.Event()
    loop = asyncio.get_running_loop()
    for sig in (signal.SIGTERM, signal.SIGINT):
        loop.add_signal_handler(sig, stop.set)
    try:
        async with lifespan(cfg, control_port=opt.sim_control, sim_speed=opt.sim_speed,
                            prepare=functools.partial(_prepare, opt=opt)) as daemon:  # fmt: skip
            await _until_stopped(daemon.running, opt, stop)
    finally:
        for sig in (signal.SIGTERM, signal.SIGINT):
            loop.remove_signal_handler(sig)


def _prepare(running: RunningRig, opt: RunOptions) -> None:
    """Before the service opens (a worker thread): events shown, the simulated device set up,
    the test opened (or the previous run's resumed once the device identifies itself)."""
    running.rig.subscribe(_shower(opt.json_events))
    piece = running.instrument
    if piece is not None:
        piece.faults.double_hit_probability = opt.sim_double_hits
        if opt.truth is not None:
            from taprig.firmware_protocol.simpiece import write_truth

            write_truth(piece.model, opt.truth)
    if opt.test is not None:
        open_test(running, opt)
    elif running.rig.resume_later():
        log.info("carrying on with the previous run's test once the device identifies itself")


def _shower(json_events: bool) -> Callable[[RigEvent], None]:
    def show(event: RigEvent) -> None:
        if json_events:
            print(json.dumps({"kind": event.kind, **event.data}, default=str), flush=True)
        else:
            log.info("%s", event_text(event))

    return show


async def _until_stopped(running: RunningRig, opt: RunOptions, stop: asyncio.Event) -> None:
    """Wait for `stop` or the end of `opt.duration`; the simulated operator taps every
    `opt.sim_taps` seconds meanwhile."""
    loop = asyncio.get_running_loop()
    tick_s = opt.sim_taps if opt.sim_taps > 0 else 1.0
    end = loop.time() + opt.duration if opt.duration > 0 else float("inf")
    while not stop.is_set() and loop.time() < end:
        with contextlib.suppress(TimeoutError):
            await asyncio.wait_for(stop.wait(), timeout=min(tick_s, max(end - loop.time(), 0)))
        tapping = running.instrument is not None and opt.sim_taps > 0
        if tapping and not stop.is_set() and running.rig.view().plan is not None:
            await asyncio.to_thread(simulated_tap, running)


def open_test(running: RunningRig, opt: RunOptions) -> None:
    """Create the test if asked (from `--grid` or the simulated device's model); select it and
    arm once the device has identified itself."""
    rig, piece, name = running.rig, running.instrument, opt.test
    assert name is not None
    known = {t.name for t in running.store.list_tests()}
    if opt.grid is not None:
        points = import_grid_csv(opt.grid.read_text(encoding="utf-8"), max_points=MAX_POINTS)
    elif piece is not None and name not in known:
        m = piece.model
        xyz = [tuple(float(v) for v in m.coords[m.index(p)]) for p in m.grid]
        points = [GridPoint(p, x, y, z) for p, (x, y, z) in zip(m.grid, xyz, strict=True)]
    else:
        points = []
    if opt.sim_taps > 0 and piece is not None:
        _check_tappable(name, points or running.store.get_test(name).grid, piece.model.grid)
    outline = _outline(opt, points)
    if points:
        _create(running, name, points, opt, outline)
    # Opened and armed once the device identifies itself: the service and the page run
    # meanwhile and say what the rig waits for (a low disk only defers arming).
    rig.open_when_ready(name, arm=True)
    settle(rig, name)


def _create(
    running: RunningRig, name: str, points: list[GridPoint], opt: RunOptions, outline: str | None
) -> None:
    """Create the test; a roving-hammer test whose sensor places are not all known is
    refused before anything is stored (the simulated structure knows where its own sit)."""
    given: dict[str, str | tuple[str, str]] = {}
    responses = {c.label for c in running.config.response_channels}
    if running.instrument is not None:  # where the simulated piece's sensors sit, if used
        m, labels = running.instrument.model, {p.label for p in points}
        for label, at in m.sensors.items():
            if label in responses:
                xyz = ",".join(f"{c:g}" for c in m.coords[m.index(at)])
                given[label] = at if at in labels else xyz
    given.update({label: (where, direction) for label, where, direction in opt.sensor_at})
    if opt.roving is RovingMode.HAMMER:
        cfg = running.config
        try:
            _, missing, _ = placement.test_places(cfg.response_channels, given, points,
                                                  opt.reference)  # fmt: skip
        except ValueError as exc:
            raise SessionError(f"test {name!r}: {exc}") from None
        if missing:
            raise SessionError(placement.missing_message(name, missing))
    running.rig.create_test(name, points, opt.roving, opt.reference, sensor_points=given,
                            outline=outline)  # fmt: skip


def _check_tappable(test: str, points: Sequence[GridPoint], on_piece: Sequence[str]) -> None:
    """SessionError unless the simulated operator can tap every point of the test."""
    missing = [p.label for p in points if p.label not in set(on_piece)]
    if missing:
        raise SessionError(
            f"--sim-taps: test {test!r} has {len(missing)} points that are not on the "
            f"simulated piece ({', '.join(missing[:5])}{', ...' if len(missing) > 5 else ''}); "
            f"its points are {on_piece[0]}..{on_piece[-1]}. Tap by hand, or use a test whose "
            "grid is the simulated piece's"
        )


def _outline(opt: RunOptions, points: list[GridPoint]) -> str | None:
    """The outline text for a new test: --outline, else the one beside --grid; checked."""
    path = opt.outline
    if path is None and opt.grid is not None:
        path = outline_beside(opt.grid)
    if path is None:
        return None
    if not points:
        raise GridError(f"outline {path}: it describes a new test's grid; give --grid too")
    return read_outline(path, points)


def simulated_tap(running: RunningRig) -> None:
    """The simulated operator: in roving-sensor mode move the sensor, then tap. A point that
    is not on the simulated piece (a test selected later from the API) is skipped, logged."""
    piece, plan = running.instrument, running.rig.view().plan
    assert piece is not None and plan is not None
    point = running.rig.snapshot()["point"]
    wanted = {point, plan.reference} if plan.roving_mode is RovingMode.SENSOR else {point}
    off_piece = sorted(str(p) for p in wanted if p not in set(piece.model.grid))
    if off_piece:
        log.warning("simulated operator: %s of test %r not on the simulated piece; not tapping",
                    ", ".join(off_piece), plan.name)  # fmt: skip
        return
    if plan.roving_mode is RovingMode.SENSOR:
        piece.move_sensor(next(iter(piece.model.sensors)), point)
        point = plan.reference
    piece.tap(point)


def settle(rig: Rig, test: str, timeout_s: float = SETTLE_S) -> None:
    """Give a device that is there a moment to identify itself, so the service opens with
    `test` selected; return at once when the device cannot be opened (the state says why)."""
    import time

    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        view = rig.view()
        if (view.plan is not None and view.plan.name == test) or (
            view.link_state is LinkState.DISCONNECTED
        ):
            return
        time.sleep(0.05)  # polling a thread's published state; there is nothing to wait on
