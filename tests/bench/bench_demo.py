"""The one-command demo end to end, as a newcomer runs it: `taprig demo --out DIR`.

Wall-clock seconds of the whole command (taprigd start, a roving-hammer pass over the
30-point demo grid with two averages and 0.64 s records, the pull, the exports, the check,
the plots, and stopping everything). Printed beside its goal, 30 s, and beside its floor:
the records themselves (taps × record length ÷ the simulated panel's speed-up over real
time, `client.demo.SPEED`), which nothing on the workstation side can shorten. Also the
CPU time of every process the demo ran (user + system, from getrusage of the finished
children): what the wall time is made of on a busy machine, where the wall time mostly
measures the neighbours.

Run: python tests/bench/bench_demo.py
"""

from __future__ import annotations

import os
import re
import resource
import subprocess
import sys
import tempfile
import time

from table import Figure, Row, pick, show

GOAL_S = 30.0


def run() -> list[Row]:
    with tempfile.TemporaryDirectory() as out:
        t0, cpu0 = time.perf_counter(), _children_cpu_s()
        done = subprocess.run([sys.executable, "-m", "taprig.client", "demo", "--out", out],
                              capture_output=True, text=True, timeout=600)  # fmt: skip
        seconds, cpu = time.perf_counter() - t0, _children_cpu_s() - cpu0
    assert done.returncode == 0, done.stderr
    taps = int(re.search(r"(\d+) taps", done.stdout).group(1))  # type: ignore[union-attr]
    stages = re.findall(r"^   ([a-z ]+?) +([0-9.]+) s$", done.stdout, re.M)
    from taprig.client.demo import BLOCK, SPEED

    record_s = BLOCK / 51_200.0 / SPEED  # wall seconds of one record at the demo's speed
    floor = taps * record_s
    load = os.getloadavg()[0]  # the machine's 1-minute load average at the end
    return [
        ("taprig demo, whole command", seconds, "s", f"goal < {GOAL_S:g} s"),
        ("CPU time of every process it ran", cpu, "s", f"user + system; load {load:.1f}"),
        (f"records alone ({taps} taps x {record_s:.3f} s)", floor, "s", "floor"),
        *((f"  stage: {name}", float(value), "s", "") for name, value in stages),
    ]


def _children_cpu_s() -> float:
    """User + system seconds of the finished children of this process and theirs (the
    demo, taprigd, the picture process: each waited for by its parent)."""
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    return usage.ru_utime + usage.ru_stime


def headline(rows: list[Row]) -> list[Figure]:
    return [Figure("taprig demo, whole command", pick(rows, "taprig demo"), "s", "<=", GOAL_S,
                   pick(rows, "records alone"), "the taps' records alone")]  # fmt: skip


if __name__ == "__main__":
    show(run())
