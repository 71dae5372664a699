"""The phone page: from a tap to its plots on the screen, in a real browser.

`taprigd run` on the simulated test piece (automatic accept), Debian's headless Chromium
paired with it (tests/web/harness.py). Each of `taps` taps is sent to the instrument's
control port; a MutationObserver in the page notes the wall-clock time at which the page
has drawn that tap (the force plot's stamp changes once all four plots are drawn). Both
clocks are this machine's, in ms. Printed beside the goal of one second, and beside the
floor no page can beat: the record length, since the rig can only judge a tap once its
whole record has arrived. Also the page's weight (every file it loads) beside a ceiling,
the time from opening the page to its live event stream, and from the device's cable pulled
(the instrument's unplug) to the page's banner saying so, beside the goal of one second.

Run: python tests/bench/bench_phone.py [--taps 10]
"""

from __future__ import annotations

import argparse
import json
import math
import statistics
import sys
import tempfile
import time
import urllib.request
from pathlib import Path
from typing import Any

from table import Figure, Row, pick, show

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "web"))

import harness

from taprig.daemon import page

GOAL_MS = 1000.0  # a tap drawn within a second
CEILING_BYTES = 80_000  # the page's files, all together
GOAL_OPEN_MS = 2000.0
GOAL_UNPLUG_MS = 1000.0  # a lost device said at the top of the page within a second
UNPLUGS = 5

WATCH = """
window.drawnAt = [];
const force = document.getElementById("plot-force");
new MutationObserver(() => window.drawnAt.push([force.dataset.stamp, Date.now()]))
  .observe(force, {attributes: true, attributeFilter: ["data-stamp"]});
window.alertAt = [];
const alert = document.getElementById("device-alert");
new MutationObserver(() => { if (!alert.hidden) window.alertAt.push(Date.now()); })
  .observe(alert, {attributes: true, attributeFilter: ["hidden"]});
"""


def unplugged_to_banner(rig: harness.Taprigd, d: Any) -> list[float]:
    """ms from each unplug to the page's device banner shown (the cable is put back after)."""
    out = []
    for i in range(UNPLUGS):
        at_ms = time.time() * 1000
        rig.control(op="unplug")
        shown = harness.wait(d, f"banner {i + 1}", lambda d, n=i: d.execute_script(
            "return window.alertAt.length > arguments[0] && window.alertAt.at(-1)", n))  # fmt: skip
        out.append(float(shown) - at_ms)
        rig.control(op="replug")
        harness.wait(d, "the banner gone", lambda d: not d.find_element("id", "device-alert")
                     .is_displayed())  # fmt: skip
    return out


def last_hit(rig: harness.Taprigd) -> dict[str, Any]:
    req = urllib.request.Request(f"{rig.base}/v1/hits/last")
    req.add_header("Authorization", f"Bearer {rig.token}")
    with urllib.request.urlopen(req, timeout=5) as resp:
        return json.loads(resp.read())  # type: ignore[no-any-return]


def run(taps: int = 10) -> list[Row]:
    with tempfile.TemporaryDirectory(prefix="taprig-bench-") as tmp:
        base = Path(tmp)
        with (
            harness.taprigd(base, "capture.averages=100") as rig,
            harness.phone(base) as d,
        ):
            t0 = time.perf_counter()
            d.get(f"{rig.base}/pair#token={rig.token}")
            chip = d.find_element("id", "link-chip")
            harness.wait(d, "a live stream", lambda d: chip.text == "live")
            opened_ms = (time.perf_counter() - t0) * 1000
            d.execute_script(WATCH)
            latencies = []
            for i in range(taps):
                tap_ms = time.time() * 1000
                rig.tap("A1")
                drawn = harness.wait(
                    d, f"tap {i + 1} drawn", lambda d, n=i: d.execute_script(
                        "return window.drawnAt.length > arguments[0] && window.drawnAt.at(-1)", n
                    ),
                )  # fmt: skip
                latencies.append(float(drawn[1]) - tap_ms)
            record_ms = 1000 * float(last_hit(rig)["duration_s"])
            unplugs = unplugged_to_banner(rig, d)
    weight = sum(len(f.body) for f in page.load().values())
    return [
        ("tap to plots drawn, median", statistics.median(latencies), "ms",
         f"goal <= {GOAL_MS:g} ms; floor: the record, {record_ms:.0f} ms"),
        ("tap to plots drawn, worst of " + str(taps), max(latencies), "ms",
         f"goal <= {GOAL_MS:g} ms"),
        ("page opened to live event stream", opened_ms, "ms", f"goal <= {GOAL_OPEN_MS:g} ms"),
        ("page weight, every file", weight / 1000, "kB", f"ceiling {CEILING_BYTES / 1000:g} kB"),
        (f"device unplugged to banner, worst of {UNPLUGS}", max(unplugs), "ms",
         f"goal <= {GOAL_UNPLUG_MS:g} ms"),
    ]  # fmt: skip


def headline(rows: list[Row]) -> list[Figure]:
    return [
        Figure("phone: tap to plots drawn, median", pick(rows, "tap to plots drawn, median"),
               "ms", "<=", GOAL_MS, math.nan, ""),
        Figure("phone: page weight", pick(rows, "page weight"), "kB", "<=",
               CEILING_BYTES / 1000, math.nan, ""),
        Figure("phone: device lost to banner", pick(rows, "device unplugged to banner"), "ms",
               "<=", GOAL_UNPLUG_MS, math.nan, ""),
    ]  # fmt: skip


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--taps", type=int, default=10)
    show(run(parser.parse_args().taps))
