"""Capture under a busy lab: samples lost per minute while 20 workstations pull every new
point set and 200 phones listen, taps going on all along (tests/faults/busylab.py).

Run twice, with the device read in the link process (device.reader = "process", the
default) and in a daemon thread ("thread"), so the figure the design exists for stands
beside the one it replaces. Goal: 0 samples lost, 0 taps lost, every tap stored.
The simulated device is 3 channels at 51.2 kHz, 24-bit, in a process of its own.
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from table import Figure, Row, pick, show  # noqa: E402

from tests.faults.busylab import run_busy_lab  # noqa: E402

PULLERS, LISTENERS = 20, 200


def run(seconds: float = 60.0) -> list[Row]:
    rows: list[Row] = []
    for reader in ("process", "thread"):
        with tempfile.TemporaryDirectory() as folder:
            lab = run_busy_lab(Path(folder), seconds=seconds, pullers=PULLERS,
                               listeners=LISTENERS, reader=reader)  # fmt: skip
        per_min = 60.0 / seconds
        lost = lab.link["samples_lost"] + lab.piece["overruns"]
        rows += [
            (f"samples lost per minute, reader {reader}", lost * per_min, "", "goal 0"),
            (f"taps not stored, reader {reader}", lab.taps - lab.point_sets, "",
             f"goal 0; of {lab.taps} taps"),
            (f"point sets pulled per minute, reader {reader}", lab.lab["pulled"] * per_min, "",
             f"{PULLERS} clients; {LISTENERS} listening, {lab.lab['errors']} errors"),
            (f"MB/s served to the lab, reader {reader}", lab.lab["bytes"] / seconds / 1e6,
             "MB/s", "while capturing"),
        ]  # fmt: skip
    return rows


def headline(rows: list[Row]) -> list[Figure]:
    return [Figure("samples lost per minute, busy lab", pick(rows, "samples lost per minute, "
                   "reader process"), "", "<=", 0.0, 0.0, "none lost")]  # fmt: skip


if __name__ == "__main__":
    show(run(float(sys.argv[1]) if len(sys.argv) > 1 else 60.0))
