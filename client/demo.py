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
from typing import TYPE_CHECKING, Any, Final

from taprig.firmware_protocol.simpiece.control import ControlClient

from .dataset import TestData
from .errors import ClientError
from .mirror import Mirror
from .pull import PullReport, pull
from .remote import RigClient, RigError
from .words import count

if TYPE_CHECKING:
    from .check import CheckResult

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


@contextlib.contextmanager
def rig_process(
    state: Path, truth: Path, log: Path, settings: Sequence[str] = ()
) -> Iterator[dict[str, Any]]:
    """settings: more ``section.key=value`` overrides for taprigd."""
    """`taprigd run` on the simulated test piece, loopback only; yields its run.json record."""
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
        yield json.loads(run_file.read_text())
    finally:
        if proc.poll() is None:
            proc.send_signal(signal.SIGTERM)
            try:
                proc.wait(timeout=20)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait()


def operate(rig: RigClient, hammer: Hammer, truth: dict[str, Any], say: Say) -> DemoResult:
    """The simulated operator: one roving-hammer pass over the truth model's grid."""
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
        last = _strike(rig, hammer, point, double)
        if not last["accepted"]:
            reason = "; ".join(str(r["message"]) for r in last["rejections"]) or "rejected"
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


def _strike(rig: RigClient, hammer: Hammer, point: str, double: bool) -> dict[str, Any]:
    """Tap and wait for the rig's verdict; tap again, as an operator who saw nothing happen
    would, when none comes within TAP_AGAIN_S (a host too busy for the sped-up panel loses
    samples, and a tap with them). ClientError after HIT_TIMEOUT_S."""
    before = _last_hit_index(rig)
    deadline = time.monotonic() + HIT_TIMEOUT_S
    while True:
        hammer.tap(point, double_hit=double)
        again = time.monotonic() + TAP_AGAIN_S
        while (last := _last_hit(rig)) is None or last["first_index"] == before:
            if time.monotonic() > deadline:
                raise ClientError(f"the tap at {point} never reached the rig")
            if time.monotonic() > again:
                break
            time.sleep(0.01)
        else:
            return last


def _last_hit(rig: RigClient) -> dict[str, Any] | None:
    try:
        return rig.last_hit()
    except RigError as exc:
        if exc.status == 404:  # no hit yet
            return None
        raise


def _last_hit_index(rig: RigClient) -> int | None:
    last = _last_hit(rig)
    return None if last is None else int(last["first_index"])


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


def _mode_pictures(data: TestData, modes: Path, folder: Path) -> list[Path]:
    """The fitted modes moving (GIF) and their sheet; run in a process of its own."""
    from .modal import ModalModel
    from .view.pictures import write_model_pictures

    return write_model_pictures(data, ModalModel.load(modes), folder)


def _plots(data: TestData, checked: CheckResult, result: DemoResult, say: Say) -> None:
    """The FRF and shape PNGs here, the mode GIFs meanwhile in a second process: each is a
    few seconds of drawing, and a two-core machine draws both at once."""
    from concurrent.futures import ProcessPoolExecutor

    from .plots import write_plots

    assert result.modes is not None  # the fit ran before the plots
    folder = result.folder / "plots"
    try:
        with ProcessPoolExecutor(max_workers=1) as pool:
            gifs = pool.submit(_mode_pictures, data, result.modes, folder)
            result.plots = write_plots(data, checked, folder)
            moving = gifs.result()
        result.plots += moving
        say(f"   {count(len(result.plots), 'plot')} in {result.folder / 'plots'}, "
            f"{count(len(moving) - 1, 'mode shape')} moving (GIF), one a sheet of every mode "
            "(PNG)")  # fmt: skip
    except ClientError as exc:  # matplotlib missing: the rest of the demo stands
        say(f"   no plots: {exc}")


def run_demo(out: Path, say: Say, plots: bool = True) -> DemoResult:
    """The whole demo; files in `out` (created). Raises ClientError when a stage fails."""
    started = time.perf_counter()
    out.mkdir(parents=True, exist_ok=True)
    truth_path = out / "truth.json"
    state = Path(tempfile.mkdtemp(prefix="taprig-demo-rig-"))
    try:
        say("-- 1. taprigd on the simulated test piece (a 600 x 400 x 3 mm aluminium panel)")
        say(f"   the simulated panel runs {SPEED:g} times faster than real time, so the taps "
            "take seconds; a real test runs at the pace of the hammer")
        with rig_process(state, truth_path, out / "taprigd.log") as record:
            url = f"http://127.0.0.1:{record['port']}"
            token = (state / "token").read_text(encoding="ascii").strip()
            truth = json.loads(truth_path.read_text(encoding="utf-8"))
            say(f"   serving on {url}/v1; grid of {len(truth.get('grid', truth['points']))} "
                f"points, {AVERAGES} averages each")  # fmt: skip
            say("-- 2. a simulated operator drives the roving hammer over HTTP")
            hammer = Hammer(int(record["control_port"]))
            stages = {"start taprigd": time.perf_counter() - started}
            try:
                with RigClient(url, token) as rig:
                    result = operate(rig, hammer, truth, say)
                    result.stages = stages
                    _lap(stages, "operator", started)
                    say(f"   {count(result.taps, 'tap')}, {len(result.rejected)} rejected, "
                        f"point {result.redone} measured again")  # fmt: skip
                    say("-- 3. the workstation pulls the rig into its mirror")
                    mirror_path = out / "mirror" / "demo-rig.sqlite3"
                    with Mirror(mirror_path) as mirror:
                        result.pulled = pull(rig, mirror)
                        p = result.pulled
                        say(f"   {count(p.point_sets, 'point set')}, {p.bytes / 1e6:.1f} MB "
                            f"verified by checksum in {p.seconds:.2f} s -> "
                            f"{mirror_path}")  # fmt: skip
                        data = mirror.load(TEST_NAME)
                    _lap(stages, "pull and load", started)
            finally:
                hammer.close()
        _lap(stages, "stop taprigd", started)
        result.folder, result.truth = out, truth_path
        say("-- 4. export, quick-look check, modal fit and plots")
        from .check import check, report_text
        from .export import export

        result.npz = export(data, out / f"{TEST_NAME}.npz", "npz")
        checked = check(data)
        result.check = out / "check.txt"
        result.check.write_text(report_text(checked), encoding="utf-8")
        say(f"   {result.npz.name} (for fitting), {result.check.name}, truth.json")
        _lap(stages, "export and check", started)
        _fit(data, result, say)
        _lap(stages, "modal fit", started)
        if plots:
            _plots(data, checked, result, say)
            _lap(stages, "plots", started)
        result.seconds = time.perf_counter() - started
        return result
    finally:
        shutil.rmtree(state, ignore_errors=True)
