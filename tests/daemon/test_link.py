"""The serial link, read in a thread (SerialLink) or in a process of its own (ProcessLink):
bytes in order, reconnect after unplug, stall detection, the same for both."""

from __future__ import annotations

import contextlib
import os
import queue
import signal
import threading
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest

from taprig.daemon.capture.link import Item, LinkChange, LinkState, SerialLink
from taprig.daemon.capture.linkproc import ProcessLink
from taprig.firmware_protocol import Command, FrameEncoder, Opcode, SampleBlock, make_decoder
from taprig.firmware_protocol.formats import Decoder
from taprig.firmware_protocol.simpiece.instrument import SimulatedPiece, open_simulated

Link = SerialLink | ProcessLink
MakeLink = Callable[..., Link]


@pytest.fixture(params=[SerialLink, ProcessLink], ids=["thread", "process"])
def make_link(request: pytest.FixtureRequest) -> MakeLink:
    kind: MakeLink = request.param
    return kind


def drain_until(link: Link, cond: Callable[[Item], bool], timeout: float = 5.0) -> list[Item]:
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


@contextlib.contextmanager
def streaming(make: MakeLink, **options: Any) -> Iterator[tuple[SimulatedPiece, Link]]:
    """A simulated piece on a new pty and a link reading it (`options` for the link),
    connected and sent START; both closed on the way out."""
    piece = open_simulated("pty")
    link = make(piece.url, **options).start()
    try:
        drain_until(link, is_state(LinkState.CONNECTED))
        link.send(FrameEncoder().command(Command(Opcode.START, 1)))
        yield piece, link
    finally:
        link.close()
        piece.close()


def test_reconnects_within_a_second_of_replug(tmp_path: Path, make_link: MakeLink) -> None:
    link_path = tmp_path / "ttyRIG"
    piece = open_simulated("pty", link=str(link_path))
    link = make_link(str(link_path)).start()
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


def test_missing_device_is_reported_not_fatal(tmp_path: Path, make_link: MakeLink) -> None:
    link = make_link(str(tmp_path / "no-such-tty")).start()
    try:
        seen = drain_until(link, is_state(LinkState.DISCONNECTED))
        change = seen[-1]
        assert isinstance(change, LinkChange) and "cannot open" in change.detail
    finally:
        link.close()


def test_a_second_reader_of_the_tty_is_refused_and_takes_nothing(make_link: MakeLink) -> None:
    """Two readers of one tty share its bytes, each getting some; the second link is refused.
    (The usual way to get there: a link retrying a path its device left, /dev/pts/N, which
    the kernel hands to the next pty at once.) Seen before the lock: the first reader's
    pyserial read found the bytes gone ("device reports readiness to read but returned no
    data"), dropped what it had read in that call and reopened the port."""
    second: SerialLink | None = None
    with streaming(make_link) as (piece, first):
        try:
            dec = make_decoder("binary")
            _samples(first, dec, 5_000, timeout=5.0)
            second = SerialLink(piece.url).start()
            refused = drain_until(second, is_state(LinkState.DISCONNECTED))[-1]
            assert isinstance(refused, LinkChange) and "lock" in refused.detail, refused
            _samples(first, dec, 20_000, timeout=5.0)  # ~0.4 s more of the stream
            assert dec.stats.samples_lost == 0 and dec.stats.crc_errors == 0
            assert first.reconnects == 0 and first.state is LinkState.CONNECTED
            assert second.state is LinkState.DISCONNECTED
            assert not any(isinstance(i, bytes) for i in list(second.items.queue))
        finally:
            if second is not None:
                second.close()


def test_stall_is_reported_and_clears(make_link: MakeLink) -> None:
    with streaming(make_link, stall_after_s=0.3) as (piece, link):
        drain_until(link, lambda i: isinstance(i, bytes))
        piece.faults.stalled = True
        t0 = time.monotonic()
        drain_until(link, is_state(LinkState.STALLED))
        assert time.monotonic() - t0 >= 0.25
        piece.faults.stalled = False
        seen = drain_until(link, is_state(LinkState.CONNECTED))
        assert isinstance(seen[-1], LinkChange) and "flowing again" in seen[-1].detail


def test_bytes_arrive_in_order_and_decode(make_link: MakeLink) -> None:
    dec = make_decoder("binary")
    with streaming(make_link) as (_, link):
        _samples(link, dec, 20_000, timeout=5.0)
        assert dec.stats.crc_errors == 0 and dec.stats.samples_lost == 0


def _samples(link: Link, dec: Decoder, wanted: int, timeout: float = 10.0) -> int:
    """Decode what the link hands over until `wanted` samples have come; their count."""
    total = 0
    deadline = time.monotonic() + timeout
    while total < wanted:
        assert time.monotonic() < deadline, f"only {total} samples in {timeout:g} s"
        try:
            item = link.items.get(timeout=0.1)
        except queue.Empty:
            continue
        if isinstance(item, bytes):
            total += sum(ev.count for ev in dec.feed(item) if isinstance(ev, SampleBlock))
    return total


@pytest.mark.parametrize("kind", [SerialLink, ProcessLink], ids=["thread", "process"])
def test_a_host_that_stops_reading_loses_nothing_only_with_the_link_process(
    kind: MakeLink,
) -> None:
    """The rig takes nothing from the link for 2 s (as a starved daemon would) while its queue
    holds only 4 reads. In a thread the reader must drop what does not fit; the link process
    holds it (the pipe fills, the child keeps reading into its own memory), and after the
    pause every sample arrives, in order."""
    dec = make_decoder("binary")
    with streaming(kind, queue_chunks=4) as (piece, link):
        _samples(link, dec, 5_000)
        pause = threading.Event()
        pause.wait(2.0)  # the starved host: nothing read meanwhile (the point of the test)
        got = _samples(link, dec, int(2.5 * piece.rate_hz))  # the 2 s held, and more
        if kind is ProcessLink:
            assert dec.stats.samples_lost == 0 and dec.stats.crc_errors == 0
            assert link.dropped_chunks == 0
        else:
            assert link.dropped_chunks > 0 and dec.stats.samples_lost > 0
        assert got >= int(2.5 * piece.rate_hz)


def test_a_killed_link_process_is_started_again() -> None:
    piece = open_simulated("pty")
    link = ProcessLink(piece.url).start()
    try:
        drain_until(link, is_state(LinkState.CONNECTED))
        first = link.child_pid
        os.kill(first, signal.SIGKILL)
        seen = drain_until(link, is_state(LinkState.DISCONNECTED))
        assert isinstance(seen[-1], LinkChange) and "link process ended" in seen[-1].detail
        drain_until(link, is_state(LinkState.CONNECTED))
        assert link.child_pid != first
        link.send(FrameEncoder().command(Command(Opcode.START, 1)))
        drain_until(link, lambda i: isinstance(i, bytes))
    finally:
        link.close()
        piece.close()
    with pytest.raises(ProcessLookupError):
        os.kill(link.child_pid, 0)  # closing ended the child too


def test_a_stale_stall_report_does_not_reopen_a_flowing_link(make_link: MakeLink) -> None:
    """The rig asks to reopen after a stall, but only if the link is still stalled: a daemon
    frozen through the stall acts on the report late, when the bytes flow again, and reopening
    then would throw the flowing data away."""
    dec = make_decoder("binary")
    with streaming(make_link, stall_after_s=0.3) as (piece, link):
        piece.faults.stalled = True
        drain_until(link, is_state(LinkState.STALLED))
        piece.faults.stalled = False
        drain_until(link, is_state(LinkState.CONNECTED))
        link.reconnect("stale", only_if_stalled=True)
        _samples(link, dec, int(0.5 * piece.rate_hz))  # the reader has gone round meanwhile
        link.reconnect("meant")
        seen = drain_until(link, is_state(LinkState.DISCONNECTED))
        assert isinstance(seen[-1], LinkChange) and seen[-1].detail == "meant"
