"""Capture loses nothing while a busy lab pulls: 20 workstations following the rig and
pulling every new point set, 200 phones listening to its events, taps going on all along.

The device is a process apart, as a real microcontroller is (tests/faults/busylab.py); the
rig reads it in its link process (device.reader = "process", the default). What must hold,
checked against the device's own counters, not only the rig's:

- no sample lost: the rig's decoder saw an unbroken sample index (link.samples_lost) and
  the device never overran its buffer waiting for the host (overruns, taps_lost);
- every tap counted and accepted: one hit and one stored point set per tap (one average per
  point), so no tap was rejected for a gap in the data;
- the lab served: every listener connected, no client met an error, and every puller got
  (nearly) every point set: the last one or two may land as the lab's time runs out.
"""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from .busylab import run_busy_lab

BUSY_S = float(os.environ.get("TAPRIG_BUSY_S", "60"))  # the minute
PULLERS, LISTENERS = 20, 200


@pytest.mark.slow
def test_capture_loses_nothing_while_a_busy_lab_pulls(tmp_path: Path) -> None:
    lab = run_busy_lab(tmp_path, seconds=BUSY_S, pullers=PULLERS, listeners=LISTENERS)
    device_lines = [x for x in lab.rig_log.splitlines() if "device" in x or "link" in x]
    # What went wrong first in a failure message: the counters, then the rig's device lines.
    summary = {"link": lab.link, "piece": lab.piece, "lab": lab.lab, "taps": lab.taps,
               "hits": lab.hits, "point_sets": lab.point_sets, "device": device_lines[-20:]}
    assert lab.taps >= 10, summary  # a tap a few seconds at worst: the rig kept answering
    assert lab.link["samples_lost"] == 0 and lab.link["crc_errors"] == 0, summary
    assert lab.link["dropped_reads"] == 0 and lab.link["reconnects"] == 0, summary
    assert lab.piece["overruns"] == 0 and lab.piece["taps_lost"] == 0, summary
    assert lab.hits == lab.taps == lab.point_sets, summary
    assert lab.lab["errors"] == 0 and lab.lab["listening"] == LISTENERS, summary
    assert lab.lab["pulled"] >= PULLERS * (lab.point_sets - 2), summary
    assert "Traceback" not in lab.rig_log
