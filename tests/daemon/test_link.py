"""The serial reader thread: bytes in order, reconnect after unplug, stall detection."""

from __future__ import annotations

import queue
import time
from collections.abc import Callable
from pathlib import Path

from taprig.daemon.capture.link import Item, LinkChange, LinkState, SerialLink
from taprig.firmware_protocol import Command, FrameEncoder, Opcode, SampleBlock, make_decoder
from taprig.firmware_protocol.simpiece.instrument import open_simulated


def drain_until(link: SerialLink, cond: Callable[[Item], bool], timeout: float = 5.0) -> list[Item]:
    seen: list[Item] = []
    deadline = time.monotonic() + timeout
    while True:
        left = deadline - time.monotonic()
        assert left > 0, (
            f"condition not met; states seen: {[i for i in seen if isinstance(i, LinkChange)]}"
        )
        try:
            item = link.items.get(timeout=min(left, 0.1))
        except queue.Empty:
            continue
        seen.append(item)
        if cond(item):
            return seen


def is_state(state: LinkState) -> Callable[[Item], bool]:
    return lambda item: isinstance(item, LinkChange) and item.state is state


def test_reconnects_within_a_second_of_replug(tmp_path: Path) -> None:
    link_path = tmp_path / "ttyRIG"
    piece = open_simulated("pty", link=str(link_path))
    link = SerialLink(str(link_path)).start()
    enc = FrameEncoder()
    try:
        drain_until(link, is_state(LinkState.CONNECTED))
        link.send(enc.command(Command(Opcode.START, 1)))
        drain_until(link, lambda i: isinstance(i, bytes))
        for _ in range(3):
            piece.unplug()
            drain_until(link, is_state(LinkState.DISCONNECTED))
            t0 = time.monotonic()
            piece.replug()
            drain_until(link, is_state(LinkState.CONNECTED), timeout=2.0)
            assert time.monotonic() - t0 < 1.0
            link.send(enc.command(Command(Opcode.START, 2)))
            drain_until(link, lambda i: isinstance(i, bytes))
        assert link.reconnects == 3
    finally:
        link.close()
        piece.close()


def test_missing_device_is_reported_not_fatal(tmp_path: Path) -> None:
    link = SerialLink(str(tmp_path / "no-such-tty")).start()
    try:
        seen = drain_until(link, is_state(LinkState.DISCONNECTED))
        change = seen[-1]
        assert isinstance(change, LinkChange) and "cannot open" in change.detail
    finally:
        link.close()


def test_stall_is_reported_and_clears() -> None:
    piece = open_simulated("pty")
    link = SerialLink(piece.url, stall_after_s=0.3).start()
    try:
        drain_until(link, is_state(LinkState.CONNECTED))
        link.send(FrameEncoder().command(Command(Opcode.START, 1)))
        drain_until(link, lambda i: isinstance(i, bytes))
        piece.faults.stalled = True
        t0 = time.monotonic()
        drain_until(link, is_state(LinkState.STALLED))
        assert time.monotonic() - t0 >= 0.25
        piece.faults.stalled = False
        seen = drain_until(link, is_state(LinkState.CONNECTED))
        assert isinstance(seen[-1], LinkChange) and "flowing again" in seen[-1].detail
    finally:
        link.close()
        piece.close()


def test_bytes_arrive_in_order_and_decode() -> None:
    piece = open_simulated("pty")
    link = SerialLink(piece.url).start()
    dec = make_decoder("binary")
    try:
        drain_until(link, is_state(LinkState.CONNECTED))
        link.send(FrameEncoder().command(Command(Opcode.START, 1)))
        total = 0
        deadline = time.monotonic() + 5
        while total < 20_000:
            assert time.monotonic() < deadline
            try:
                item = link.items.get(timeout=0.1)
            except queue.Empty:
                continue
            if isinstance(item, bytes):
                total += sum(ev.count for ev in dec.feed(item) if isinstance(ev, SampleBlock))
        assert dec.stats.crc_errors == 0 and dec.stats.samples_lost == 0
    finally:
        link.close()
        piece.close()
