"""The view page: a 500-point test opened in headless Chromium, to its first animated frame,
and the animation's frame rate.

The test is the same aluminium panel as the demo, tapped on a 25 × 20 grid (500 points,
cell-centred) with its analytic accelerance (tests/client/analytic.py), 0 to 1 kHz in
0.5 Hz lines; its modes are the panel's own (through the modal-fit adapter), its geometry
the grid, triangulated (2·24·19 = 912 triangles). Times are the browser's own clock from
the start of navigation. The floor beside the opening time is the time the page's files
and its data took to arrive (the last response's end, Resource Timing), since nothing can
be drawn before its data is there. The frame rate is counted over `seconds`; its ceiling
is the browser's animation-frame rate (what an empty requestAnimationFrame loop gets in
the same browser), and the time one frame's drawing takes is printed beside it.

The report pictures: the time to write one mode's GIF (FRAMES frames at DPI, one cycle)
for the demo-sized panel (30 points) and the 500-point test, per mode over several modes,
beside the goal of 1 s and beside its floor, Pillow alone writing the same frames (already
drawn) into a GIF; its CPU time too (on a machine others share, the wall time is mostly
waiting for a core); and the PNG sheet of every mode.

Run: python tests/bench/bench_view.py [--opens 3]
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

from table import Figure, Row, pick, show

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402

from taprig.client.view import pictures  # noqa: E402
from taprig.client.view.geometry import from_grid  # noqa: E402
from taprig.client.view.payload import normalise, spread  # noqa: E402
from taprig.client.view.server import ViewServer, ViewThread  # noqa: E402
from taprig.firmware_protocol.simpiece import simply_supported_plate  # noqa: E402
from tests.client.analytic import analytic_test_data  # noqa: E402
from tests.view.browser import desktop, wait  # noqa: E402
from tests.view.conftest import FREQ, PANEL, TAU_S, truth_modes  # noqa: E402

GOAL_OPEN_MS = 1000.0
GOAL_FPS = 30.0
GOAL_GIF_S = 1.0  # one mode's GIF
COLS, ROWS = 25, 20

ARRIVED = """
const all = [performance.getEntriesByType("navigation")[0],
             ...performance.getEntriesByType("resource")];
return Math.max(...all.map((e) => e.responseEnd));
"""
EMPTY_LOOP = """
const done = arguments[arguments.length - 1];
let n = 0; const t0 = performance.now();
function tick(now) {
  n += 1;
  if (now - t0 < 2000) requestAnimationFrame(tick); else done(n / ((now - t0) / 1000));
}
requestAnimationFrame(tick);
"""


def panel_500() -> tuple[object, object]:
    """(TestData, ModeSet) of the 500-point panel test (module docstring)."""
    points = {f"P{r:02d}{c:02d}": ((c + 0.5) * 0.6 / COLS, (r + 0.5) * 0.4 / ROWS)
              for r in range(ROWS) for c in range(COLS)}  # fmt: skip
    points["X1"] = (0.467, 0.328)
    grid = [p for p in points if p != "X1"]
    sensors = {"acc1": grid[130], "acc2": "X1"}
    model = simply_supported_plate(0.6, 0.4, 0.003, 69e9, 0.33, 2700.0, 0.01, 1000.0, points,
                                   sensors=sensors, grid=grid)  # fmt: skip
    freq = np.arange(0.0, 1000.0 + 1e-9, 0.5)
    data = analytic_test_data(model, freq, 0.5)
    return data, truth_modes(model, data)


def gif_rows(data: object, modes: object, what: str, n_modes: int) -> list[Row]:
    """Seconds per mode's GIF over the first `n_modes` modes, its floor and the sheet."""
    from PIL import Image, ImageSequence

    geometry = from_grid(data.grid)  # type: ignore[attr-defined]
    shapes = normalise(spread(modes.shape, modes.point, geometry))  # type: ignore[attr-defined]
    times, cpus, floors = [], [], []
    with tempfile.TemporaryDirectory(prefix="taprig-bench-") as tmp:
        for m in range(n_modes):
            path = Path(tmp) / f"mode-{m}.gif"
            t0, c0 = time.perf_counter(), time.process_time()
            pictures._gif(data, modes, geometry, shapes[m], m, path,  # type: ignore[arg-type]
                          pictures.FRAMES)  # fmt: skip
            times.append(time.perf_counter() - t0)
            cpus.append(time.process_time() - c0)
            with Image.open(path) as gif:
                frames = [f.convert("RGB") for f in ImageSequence.Iterator(gif)]
            t0 = time.perf_counter()
            pictures._write_gif(frames, Path(tmp) / "again.gif")
            floors.append(time.perf_counter() - t0)
        t0 = time.perf_counter()
        pictures._sheet(data, modes, geometry, shapes, Path(tmp) / "sheet.png")  # type: ignore[arg-type]
        sheet = time.perf_counter() - t0
    size = f"{pictures.FRAMES} frames at {pictures.DPI} dpi"
    return [
        (f"one mode's GIF, {what}, median", statistics.median(times), "s",
         f"goal <= {GOAL_GIF_S:g} s; floor: Pillow writing its frames, "
         f"{statistics.median(floors):.2f} s; {size}, {n_modes} modes"),
        (f"GIF floor, {what}: Pillow writing the frames", statistics.median(floors), "s", size),
        (f"one mode's GIF, {what}, CPU time", statistics.median(cpus), "s",
         "this process's CPU: what the wall time would be on an idle core"),
        (f"PNG sheet of {len(modes)} modes, {what}", sheet, "s", ""),  # type: ignore[arg-type]
    ]  # fmt: skip


def run(opens: int = 3, seconds: float = 3.0) -> list[Row]:
    demo = analytic_test_data(PANEL, FREQ, TAU_S)
    rows = gif_rows(demo, truth_modes(PANEL, demo), "30 points", 6 if opens > 1 else 2)
    data, modes = panel_500()
    rows += gif_rows(data, modes, "500 points", 3 if opens > 1 else 1)
    geometry = from_grid(data.grid)  # type: ignore[attr-defined]
    server = ViewServer(data, modes, geometry)  # type: ignore[arg-type]
    weight_files = sum(len(b) for b in server.files.values())
    weight_data = len(server.opening.encode())
    first, arrived = [], []
    with tempfile.TemporaryDirectory(prefix="taprig-bench-") as tmp, ViewThread(server) as vt, \
            desktop(Path(tmp)) as d:  # fmt: skip
        for _ in range(opens):
            d.get("about:blank")
            d.get(vt.url)
            first.append(float(wait(d, "the first animated frame", lambda d: d.execute_script(
                "return window.taprigView && window.taprigView.firstFrameAt"))))  # fmt: skip
            arrived.append(float(d.execute_script(ARRIVED)))
        n0, t0 = d.execute_script("return [window.taprigView.frames, performance.now()]")
        time.sleep(seconds)  # a measuring window, not a wait for a condition
        n1, t1 = d.execute_script("return [window.taprigView.frames, performance.now()]")
        draw_ms = float(d.execute_script("return window.taprigView.drawMs"))
        d.set_script_timeout(10)
        d.get("about:blank")
        ceiling = float(d.execute_async_script(EMPTY_LOOP))
    fps = (n1 - n0) / ((t1 - t0) / 1000)
    floor = statistics.median(arrived)
    return [
        *rows,
        ("page open to first animated frame, median", statistics.median(first), "ms",
         f"goal <= {GOAL_OPEN_MS:g} ms; floor: page and data arrived, {floor:.0f} ms"),
        ("page and data arrived (floor), median", floor, "ms", f"of {opens} opens"),
        ("animation frame rate, 500 points", fps, "fps",
         f"goal >= {GOAL_FPS:g}; ceiling: empty animation loop {ceiling:.0f} fps"),
        ("empty animation loop (ceiling)", ceiling, "fps", "the browser's frame clock"),
        ("drawing one frame", draw_ms, "ms", f"{len(geometry.triangles)} triangles"),
        ("page weight: files", weight_files / 1000, "kB", "HTML, CSS, JS; uncompressed"),
        ("page weight: data", weight_data / 1000, "kB",
         f"{len(data.points)} points, {data.freq_hz.size} lines, {len(modes)} modes"),  # type: ignore[attr-defined]
    ]  # fmt: skip


def headline(rows: list[Row]) -> list[Figure]:
    return [
        Figure("view: page open to first animated frame (500 points)",
               pick(rows, "page open to first"), "ms", "<=", GOAL_OPEN_MS,
               pick(rows, "page and data arrived"), "floor: page and data arrived"),
        Figure("view: animation frame rate (500 points)", pick(rows, "animation frame rate"),
               "fps", ">=", GOAL_FPS, pick(rows, "empty animation loop"),
               "the browser's empty animation loop"),
        Figure("view: one mode's GIF (30 points)", pick(rows, "one mode's GIF, 30"), "s", "<=",
               GOAL_GIF_S, pick(rows, "GIF floor, 30"), "Pillow writing its frames alone"),
        Figure("view: one mode's GIF (500 points)", pick(rows, "one mode's GIF, 500"), "s",
               "<=", GOAL_GIF_S, pick(rows, "GIF floor, 500"), "Pillow writing its frames alone"),
    ]  # fmt: skip


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--opens", type=int, default=3)
    show(run(parser.parse_args().opens))
