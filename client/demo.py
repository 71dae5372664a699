"""The one-command demo: a whole roving-hammer test on the simulated test piece, end to end.

`run_demo` starts `taprigd` on its simulated test piece (an aluminium panel in software) in a
temporary state folder, and a simulated operator drives the test through the rig's HTTP
API exactly as the phone page or a script would: create the test, select, arm, tap every
grid point until it has its averages (the hammer itself is the instrument's control port,
the one thing an operator does with a hand rather than a request), with a few double hits
that the rig rejects and one point measured again with *redo*. The client then pulls the
rig into a mirror, exports the test, runs the quick-look check, fits the modes (modes.npz
and a table beside the panel's truth), draws the plots, and stops everything it started.
"""

from __future__ import annotations

import contextlib
import json
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Final

from taprig.firmware_protocol.simpiece.control import ControlClient

from .dataset import TestData
from .demo_pictures import PictureWorker
from .errors import ClientError
from .events import EventFeed
from .mirror import Mirror
from .pull import PullReport, pull
from .remote import RigClient
from .words import count

TEST_NAME: Final = "demo-panel"
AVERAGES: Final = 2
# 0.64 s records (32768 samples at 51.2 kHz, 1.56 Hz lines): long enough for the panel's
# lightly damped first modes to ring down most of the way before the exponential window
# takes the rest, so that their Q survives the window correction; two averages a point
# keep the whole demo within a minute.
BLOCK: Final = 32_768
# The simulated panel runs this many times faster than real time (taprigd --sim-speed):
# a 0.64 s record arrives in a quarter of that, so 65 taps take seconds, not a minute. The
# spectra are the same: the rig counts time on the device's sample clock, not the wall's.
SPEED: Final = 6.0
DOUBLE_HIT_TAPS: Final = (4, 17, 33, 50)  # the n-th taps of the session strike twice
REDO_POINT_INDEX: Final = 6  # the operator measures this grid point again (redo)
START_TIMEOUT_S: Final = 30.0
# A tap shows up as a hit within a fraction of a second; this much only on a machine so busy
# that the simulated panel falls behind (it catches up, as a device's buffer would), seconds.
HIT_TIMEOUT_S: Final = 30.0
TAP_AGAIN_S: Final = 3.0  # no verdict this long after a tap: the operator taps again, s

Say = Callable[[str], None]


@dataclass(slots=True)
class DemoResult:
    """Where the demo's files went and what the operator did."""

    folder: Path
    npz: Path
    truth: Path
    check: Path
    plots: list[Path] = field(default_factory=list)
    taps: int = 0
    rejected: list[tuple[str, str]] = field(default_factory=list)  # (point, reason)
    redone: str | None = None
    pulled: PullReport | None = None
    seconds: float = 0.0
    stages: dict[str, float] = field(default_factory=dict)  # seconds per stage
    modes: Path | None = None  # the fitted modal model (modes.npz)
    mode_table: list[str] = field(default_factory=list)  # fitted modes beside the truth


class Hammer:
    """The operator's hammer: strikes the simulated test piece through its control port."""

    def __init__(self, port: int) -> None:
        self._control = ControlClient(port)

    def tap(self, point: str, double_hit: bool = False) -> None:
        reply = self._control.request("tap", point=point, double_hit=double_hit, overload=False)
        if not reply.get("ok"):
            raise ClientError(f"the simulated hammer did not strike {point}: {reply}")

    def close(self) -> None:
        self._control.close()


@dataclass(slots=True)
class RigRun:
    """A running `taprigd run` of the demo: its run.json record and its state folder."""

    proc: subprocess.Popen[bytes]
    state: Path
    record: dict[str, Any] = field(default_factory=dict)
    started: float = 0.0  # time.perf_counter() when the demo started, s

    def stop(self) -> None:
        """Ask taprigd to stop (SIGTERM) without waiting for it; `rig_process` waits."""
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGTERM)


@contextlib.contextmanager
def rig_process(
    state: Path, truth: Path, log: Path, settings: Sequence[str] = ()
) -> Iterator[RigRun]:
    """`taprigd run` on the simulated test piece, loopback only, until the block ends;
    settings: more ``section.key=value`` overrides."""
    cmd = [
        sys.executable, "-m", "taprig.daemon", "run",
        "--set", f"store.data_dir={state}", "--set", "store.min_free_mb=1",
        "--set", "service.bind=127.0.0.1", "--set", "service.port=0",
        "--set", "service.advertise=false", "--set", "rig.name=demo-rig",
        "--set", f"capture.averages={AVERAGES}", "--set", "capture.accept=auto",
        "--set", f"capture.block={BLOCK}",
        "--sim-control", "0", "--truth", str(truth), "--sim-speed", f"{SPEED:g}",
        *(arg for setting in settings for arg in ("--set", setting)),
    ]  # fmt: skip
    with log.open("w") as err:
        proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=err)
    try:
        run_file = state / "run.json"
        deadline = time.monotonic() + START_TIMEOUT_S
        while not run_file.exists():
            if proc.poll() is not None:
                raise ClientError(f"taprigd stopped at start:\n{log.read_text()[-2000:]}")
            if time.monotonic() > deadline:
                raise ClientError(f"taprigd did not start in {START_TIMEOUT_S:g} s")
            time.sleep(0.05)
        yield RigRun(proc, state, json.loads(run_file.read_text()))
    finally:
        RigRun(proc, state).stop()
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()


def operate(
    rig: RigClient, events: EventFeed, hammer: Hammer, truth: dict[str, Any], say: Say
) -> DemoResult:
    """The simulated operator: one roving-hammer pass over the truth model's grid, each tap's
    verdict heard from the rig's event stream."""
    result = DemoResult(Path(), Path(), Path(), Path())
    points: dict[str, list[float]] = truth["points"]
    labels: list[str] = truth.get("grid", list(points))
    grid = [{"label": p, "x": points[p][0], "y": points[p][1], "z": points[p][2]} for p in labels]
    rig.create_test(TEST_NAME, grid, averages=AVERAGES, roving_mode="hammer",
                    sensors=sensor_places(truth))  # fmt: skip
    _wait_for_device(rig)
    rig.act("select", test=TEST_NAME)
    rig.act("arm")
    redo_point = labels[REDO_POINT_INDEX % len(labels)]
    redo_pending = True
    while True:
        state = rig.state()
        session = state["session"]
        if len(session["done"]) == len(labels):
            break
        point = session["point"]
        if point == redo_point and redo_pending and session["averages"] == AVERAGES - 1:
            say(f"   {point}: the operator is unhappy with a tap and measures the point again")
            rig.act("redo")
            result.redone, redo_pending = point, False
            continue
        result.taps += 1
        if result.taps > 4 * AVERAGES * len(labels):
            raise ClientError(f"{result.taps} taps and the grid is still not done; see the log")
        double = result.taps in DOUBLE_HIT_TAPS
        last = _strike(events, hammer, point, double)
        if not last["accepted"]:
            reason = "; ".join(str(message) for _, message in last["rejections"]) or "rejected"
            result.rejected.append((point, reason))
            say(f"   {point}: tap rejected by the rig: {reason}")
    rig.act("disarm")
    return result


def sensor_places(truth: dict[str, Any]) -> dict[str, dict[str, str]]:
    """Where the panel's accelerometers sit, as the operator tells the rig: a grid label, or
    x,y,z (m) for one off the tap grid; both measure along +z, out of the panel's plane."""
    grid = set(truth.get("grid", truth["points"]))
    places = {}
    for label, point in truth.get("sensors", {}).items():
        at = point if point in grid else ",".join(f"{c:g}" for c in truth["points"][point])
        places[label] = {"at": at, "direction": "+z"}
    return places


def _strike(events: EventFeed, hammer: Hammer, point: str, double: bool) -> dict[str, Any]:
    """Tap and wait for the rig's verdict (its `hit` event); tap again, as an operator who saw
    nothing happen would, when none comes within TAP_AGAIN_S (a host too busy for the sped-up
    panel loses samples, and a tap with them). ClientError after HIT_TIMEOUT_S."""
    events.drain()  # a late verdict of an earlier tap is not this one's
    deadline = time.monotonic() + HIT_TIMEOUT_S
    while time.monotonic() < deadline:
        hammer.tap(point, double_hit=double)
        again = min(time.monotonic() + TAP_AGAIN_S, deadline)
        while (left := again - time.monotonic()) > 0:
            hit = events.next("hit", left)
            if hit is not None and hit["point"] == point:  # not a late one of another point
                return hit
    raise ClientError(f"the tap at {point} never reached the rig")


def _wait_for_device(rig: RigClient) -> None:
    deadline = time.monotonic() + START_TIMEOUT_S
    while rig.state().get("device") is None:
        if time.monotonic() > deadline:
            raise ClientError("the simulated test piece never identified itself")
        time.sleep(0.05)


def _lap(stages: dict[str, float], name: str, started: float) -> None:
    """Record stage `name` as the time since `started` not yet given to earlier stages."""
    stages[name] = time.perf_counter() - started - sum(stages.values())


def _fit(data: TestData, result: DemoResult, say: Say) -> None:
    """The modal fit: modes.npz and the mode table beside the truth."""
    from taprig.firmware_protocol.simpiece import load_truth

    from .demo_modes import truth_table
    from .modal import fit

    model = fit(data)
    result.modes = model.save(result.folder / "modes.npz")
    result.mode_table = [f"{model.n_modes} modes fitted (pLSCF + LSFD) beside the panel's "
                         "truth:", *truth_table(model, load_truth(result.truth))]  # fmt: skip
    say(f"   {result.modes.name}: {count(model.n_modes, 'mode')}")


def _capture(run: RigRun, truth_path: Path, out: Path, say: Say) -> tuple[DemoResult, TestData]:
    """Steps 2 and 3: the operator's pass over the grid, then the pull into a mirror."""
    url = f"http://127.0.0.1:{run.record['port']}"
    token = (run.state / "token").read_text(encoding="ascii").strip()
    truth = json.loads(truth_path.read_text(encoding="utf-8"))
    say(f"   serving on {url}/v1; grid of {len(truth.get('grid', truth['points']))} "
        f"points, {AVERAGES} averages each")  # fmt: skip
    say("-- 2. a simulated operator drives the roving hammer over HTTP")
    stages = {"start taprigd": time.perf_counter() - run.started}
    hammer = Hammer(int(run.record["control_port"]))
    try:
        with RigClient(url, token) as rig:
            with EventFeed(url, token) as events:
                result = operate(rig, events, hammer, truth, say)
            result.stages = stages
            _lap(stages, "operator", run.started)
            say(f"   {count(result.taps, 'tap')}, {len(result.rejected)} rejected, "
                f"point {result.redone} measured again")  # fmt: skip
            say("-- 3. the workstation pulls the rig into its mirror")
            mirror_path = out / "mirror" / "demo-rig.sqlite3"
            with Mirror(mirror_path) as mirror:
                result.pulled = p = pull(rig, mirror)
                say(f"   {count(p.point_sets, 'point set')}, {p.bytes / 1e6:.1f} MB verified by "
                    f"checksum in {p.seconds:.2f} s -> {mirror_path}")  # fmt: skip
                data = mirror.load(TEST_NAME)
            _lap(stages, "pull and load", run.started)
    finally:
        hammer.close()
    return result, data


def _analyse(data: TestData, result: DemoResult, pictures: PictureWorker | None, say: Say,
             started: float) -> None:  # fmt: skip
    """Step 4: the export, the quick-look check, the modal fit and the pictures."""
    from .check import check, report_text
    from .export import export

    say("-- 4. export, quick-look check, modal fit and plots")
    out, stages = result.folder, result.stages
    result.npz = export(data, out / f"{TEST_NAME}.npz", "npz")
    checked = check(data)
    result.check = out / "check.txt"
    result.check.write_text(report_text(checked), encoding="utf-8")
    say(f"   {result.npz.name} (for fitting), {result.check.name}, truth.json")
    _lap(stages, "export and check", started)
    _fit(data, result, say)
    _lap(stages, "modal fit", started)
    if pictures is None or result.modes is None:
        return
    try:
        result.plots = pictures.draw(data, checked, result.modes, out / "plots")
        gifs = sum(1 for p in result.plots if p.suffix == ".gif")
        say(f"   {count(len(result.plots), 'plot')} in {out / 'plots'}, {count(gifs, 'mode shape')}"
            " moving (GIF), one a sheet of every mode (PNG)")  # fmt: skip
    except ClientError as exc:  # matplotlib missing: the rest of the demo stands
        say(f"   no plots: {exc}")
    _lap(stages, "plots", started)


def run_demo(out: Path, say: Say, plots: bool = True) -> DemoResult:
    """The whole demo; files in `out` (created). Raises ClientError when a stage fails.

    taprigd is told to stop as soon as the pull is done and shuts down while the workstation
    works; the picture process starts (and imports) once taprigd runs, while the operator
    taps."""
    started = time.perf_counter()
    out.mkdir(parents=True, exist_ok=True)
    truth_path = out / "truth.json"
    state = Path(tempfile.mkdtemp(prefix="taprig-demo-rig-"))
    pictures: PictureWorker | None = None
    try:
        say("-- 1. taprigd on the simulated test piece (a 600 x 400 x 3 mm aluminium panel)")
        say(f"   the simulated panel runs {SPEED:g} times faster than real time, so the taps "
            "take seconds; a real test runs at the pace of the hammer")  # fmt: skip
        with rig_process(state, truth_path, out / "taprigd.log") as run:
            run.started = started
            # Once taprigd has started (not to slow that down); warm by the end of the taps.
            pictures = PictureWorker() if plots else None
            result, data = _capture(run, truth_path, out, say)
            run.stop()
            result.folder, result.truth = out, truth_path
            _analyse(data, result, pictures, say, started)
        _lap(result.stages, "stop taprigd", started)
        result.seconds = time.perf_counter() - started
        return result
    finally:
        if pictures is not None:
            pictures.close()
        shutil.rmtree(state, ignore_errors=True)
