"""A text board that prints its rate once, at power-up, before the rig opens the port.

Opening a serial port discards the input waiting in the driver (pyserial flushes on open),
so that line is lost on a real pseudo-terminal here as on a USB board. The rig asks for it
again with a "?rate" line (firmware_protocol/PROTOCOL.md §4); a board that cannot answer
is told to the operator by the setting that fixes it, device.text_rate_hz.
"""

from __future__ import annotations

import math
import queue
import time
from collections.abc import Iterator
from pathlib import Path

import pytest

from taprig.daemon.config import load_config
from taprig.daemon.rig import Rig
from taprig.daemon.rigstate import RigEvent
from taprig.daemon.store import Store
from taprig.firmware_protocol.simpiece.instrument import InstrumentSettings, open_simulated

CHANNELS = "".join(
    f'[[channels]]\nindex = {i}\nrole = "{role}"\nlabel = "{label}"\nsensitivity = {s}\n'
    f'unit = "{unit}"\n'
    for i, (role, label, s, unit) in enumerate([("force", "hammer", 2.25, "mV/N"),
                                                 ("response", "acc1", 1.02, "mV/(m/s^2)"),
                                                 ("response", "acc2", 1.02, "mV/(m/s^2)")])
)  # fmt: skip


def _rig(tmp_path: Path, answers: bool) -> Iterator[tuple[Rig, queue.Queue[RigEvent]]]:
    settings = InstrumentSettings(output="text", rate_hz=5000.0, info_interval_s=math.inf,
                                  answers_rate_query=answers)  # fmt: skip
    piece = open_simulated("pty", settings=settings)
    deadline = time.monotonic() + 10.0
    while piece.counters.bytes_sent == 0:  # the rate line is out before anyone opens the port
        assert time.monotonic() < deadline, "the board never printed"
        time.sleep(0.01)
    cfg_file = tmp_path / "rig.toml"
    cfg_file.write_text(f'[device]\nurl = "{piece.url}"\nformat = "text"\n{CHANNELS}',
                        encoding="utf-8")  # fmt: skip
    cfg = load_config(cfg_file, [f"store.data_dir={tmp_path / 'data'}"], environ={})
    store = Store(cfg.store.data_dir)
    rig = Rig(cfg, store)
    events: queue.Queue[RigEvent] = queue.Queue()
    rig.subscribe(events.put)
    rig.start()
    try:
        yield rig, events
    finally:
        rig.close()
        store.close()
        piece.close()


@pytest.fixture
def answering(tmp_path: Path) -> Iterator[tuple[Rig, queue.Queue[RigEvent]]]:
    yield from _rig(tmp_path, answers=True)


@pytest.fixture
def silent(tmp_path: Path) -> Iterator[tuple[Rig, queue.Queue[RigEvent]]]:
    yield from _rig(tmp_path, answers=False)


def test_the_rig_asks_a_text_board_for_its_rate(
    answering: tuple[Rig, queue.Queue[RigEvent]],
) -> None:
    rig, _ = answering
    deadline = time.monotonic() + 10.0
    while rig.view().info is None:
        assert time.monotonic() < deadline, "the rate never arrived"
        time.sleep(0.01)
    assert rig.view().info.rate_hz == 5000.0  # type: ignore[union-attr]


def test_a_board_that_cannot_answer_names_the_setting(
    silent: tuple[Rig, queue.Queue[RigEvent]],
) -> None:
    rig, events = silent
    deadline = time.monotonic() + 10.0
    while True:
        left = deadline - time.monotonic()
        assert left > 0, "no message about the missing rate"
        try:
            event = events.get(timeout=left)
        except queue.Empty:
            continue
        if event.kind == "message" and "no sample rate" in event.data["text"]:
            break
    assert "set device.text_rate_hz = <Hz> in the configuration" in event.data["text"]
    assert "rate_hz in the configuration" not in event.data["text"].replace("text_rate_hz", "")
    assert rig.view().info is None
