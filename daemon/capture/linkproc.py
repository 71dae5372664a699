"""The serial link in its own OS process, so that nothing the daemon does can starve the port.

A device streaming 4 channels at 51.2 kHz fills a USB or pseudo-terminal buffer in a few
tens of milliseconds. A reader thread inside the daemon shares one interpreter lock with the
HTTP service, the spectra and the store; twenty workstations pulling at once can keep it off
the CPU that long. `ProcessLink` therefore runs a `SerialLink` in a small child process
(`python -m taprig.daemon.capture.linkchild`, which imports pyserial and nothing heavy). The
child reads the port at once whatever the daemon is doing and holds what it read in memory
(`CHILD_QUEUE_CHUNKS` reads, about 80 s of the fastest stream) until the daemon takes it. A
daemon that falls behind therefore catches up later and loses nothing; only a daemon stalled
longer than that makes the child drop reads, which it counts and reports.

`ProcessLink` offers what `SerialLink` offers (`items`, `send`, `reconnect`, `close`, `state`,
`reconnects`, `dropped_chunks`), so the rig does not know which one it drives. A child that
dies is started again after a pause; the consumer sees DISCONNECTED, then CONNECTED.

Between the two processes, on the child's stdin and stdout, each message is one frame: a kind
byte, a 4-byte little-endian length, then the payload (`pack`, `FrameReader`).
"""

from __future__ import annotations

import contextlib
import logging
import queue
import struct
import subprocess
import sys
import time
from typing import IO, Any, Final

from .link import (
    BACKOFF_FIRST_S,
    BACKOFF_MAX_S,
    Item,
    LinkBase,
    LinkChange,
    LinkState,
    log_state,
)

log = logging.getLogger(__name__)

# child → daemon
DATA: Final = b"D"  # bytes read from the port
STATE: Final = b"S"  # "<state value>\n<detail>", utf-8
COUNTS: Final = b"N"  # reconnects, dropped reads: two uint32
# daemon → child
WRITE: Final = b"W"  # bytes to write to the port
KICK: Final = b"K"  # drop the port and open it again: b"?" (only if stalled) or b"!", then why

_HEADER: Final = struct.Struct("<cI")
_COUNTS: Final = struct.Struct("<II")
CHILD_QUEUE_CHUNKS: Final = 4096  # reads of up to 20 ms each the child holds: about 80 s
CHILD_MODULE: Final = "taprig.daemon.capture.linkchild"
STOP_WAIT_S: Final = 5.0  # how long a closing child may take before it is killed
LIVED_S: Final = 1.0  # a child that ran this long had worked: the next starts without backoff


def pack(kind: bytes, payload: bytes) -> bytes:
    """One frame: kind, length, payload."""
    return _HEADER.pack(kind, len(payload)) + payload


def pack_counts(reconnects: int, dropped: int) -> bytes:
    return pack(COUNTS, _COUNTS.pack(reconnects, dropped))


def unpack_counts(payload: bytes) -> tuple[int, int]:
    reconnects, dropped = _COUNTS.unpack(payload)
    return int(reconnects), int(dropped)


def pack_state(change: LinkChange) -> bytes:
    return pack(STATE, f"{change.state.value}\n{change.detail}".encode())


def unpack_state(payload: bytes) -> LinkChange:
    state, _, detail = payload.decode("utf-8", "replace").partition("\n")
    return LinkChange(LinkState(state), detail)


class FrameReader:
    """Reads whole frames from a binary stream; `next()` is None at the end of the stream."""

    def __init__(self, stream: IO[bytes]) -> None:
        self._stream = stream

    def next(self) -> tuple[bytes, bytes] | None:
        header = self._read(_HEADER.size)
        if header is None:
            return None
        kind, length = _HEADER.unpack(header)
        payload = self._read(length) if length else b""
        return None if payload is None else (kind, payload)

    def _read(self, n: int) -> bytes | None:
        parts, left = [], n
        while left:
            chunk = self._stream.read(left)
            if not chunk:
                return None
            parts.append(chunk)
            left -= len(chunk)
        return b"".join(parts)


class ProcessLink(LinkBase):
    """Reads a pyserial URL in a child process. `items` yields bytes and LinkChange values."""

    thread_name = "link-process"

    def __init__(self, url: str, **options: Any) -> None:
        super().__init__(url, **options)
        self.child_pid = 0
        self._child: subprocess.Popen[bytes] | None = None

    def close(self) -> None:
        """Stop the child (it closes the port) and the thread that reads it. Safe to call twice."""
        if self._closed:
            return
        self._closed = True
        self._stop.set()
        self._end_child()
        if self._thread.is_alive():
            self._thread.join(timeout=STOP_WAIT_S)
        self._set_state(LinkChange(LinkState.CLOSED, "closed by the host"))

    def send(self, data: bytes) -> bool:
        """Write to the device; False (nothing sent) while it is not connected."""
        if self.state not in (LinkState.CONNECTED, LinkState.STALLED):
            return False
        return self._to_child(pack(WRITE, data))

    def reconnect(self, why: str, *, only_if_stalled: bool = False) -> None:
        """Ask the child to drop the port and open it again (as SerialLink.reconnect)."""
        self._to_child(pack(KICK, (b"?" if only_if_stalled else b"!") + why.encode()))

    # --- the thread that keeps a child and reads it ------------------------------------

    def _run(self) -> None:
        backoff = BACKOFF_FIRST_S
        while not self._stop.is_set():
            child = self._spawn()
            if child is not None:
                began = time.monotonic()
                with child:  # closes its pipes, waits for it
                    self._follow(child)
                code = child.returncode
                if self._stop.is_set():
                    return
                self._set_state(LinkChange(
                    LinkState.DISCONNECTED, f"the link process ended (exit code {code}); restarting"
                ))  # fmt: skip
                if time.monotonic() - began > LIVED_S:
                    backoff = BACKOFF_FIRST_S  # it had worked: try again at once
            self._stop.wait(backoff)
            backoff = min(backoff * 2.0, BACKOFF_MAX_S)

    def _spawn(self) -> subprocess.Popen[bytes] | None:
        argv = [sys.executable, "-m", CHILD_MODULE, self.url, str(self.baudrate),
                repr(self.stall_after_s)]  # fmt: skip
        try:
            child = subprocess.Popen(argv, stdin=subprocess.PIPE, stdout=subprocess.PIPE)
        except OSError as exc:
            why = f"cannot start the link process: {exc}"
            self._set_state(LinkChange(LinkState.DISCONNECTED, why))
            return None
        with self._write_lock:
            self._child = child
        self.child_pid = child.pid
        log.debug("link process %d reads %s", child.pid, self.url)
        return child

    def _follow(self, child: subprocess.Popen[bytes]) -> None:
        """Hand over what the child sends until it ends."""
        assert child.stdout is not None
        frames = FrameReader(child.stdout)
        while (frame := frames.next()) is not None:
            kind, payload = frame
            if kind == DATA:
                self._put(payload)
            elif kind == STATE:
                self._set_state(unpack_state(payload))
            elif kind == COUNTS:
                self.reconnects, self.dropped_chunks = unpack_counts(payload)
        with self._write_lock:
            self._child = None

    def _put(self, item: Item) -> None:
        """Into `items`, waiting while the rig is behind: the child keeps reading meanwhile."""
        while not self._stop.is_set():
            try:
                self.items.put(item, timeout=0.5)
                return
            except queue.Full:
                continue

    def _to_child(self, frame: bytes) -> bool:
        with self._write_lock:
            child = self._child
            if child is None or child.stdin is None:
                return False
            try:
                child.stdin.write(frame)
                child.stdin.flush()
                return True
            except (OSError, ValueError) as exc:  # ValueError: the pipe was just closed
                log.debug("link process %d: %s", child.pid, exc)
                return False

    def _end_child(self) -> None:
        with self._write_lock:
            child = self._child
            if child is not None and child.stdin is not None:
                with contextlib.suppress(OSError):
                    child.stdin.close()  # end of input: the child closes the port and exits
        if child is None:
            return
        try:
            child.wait(timeout=STOP_WAIT_S)
        except subprocess.TimeoutExpired:
            log.warning("link process %d did not stop; killing it", child.pid)
            child.kill()
            child.wait()

    def _set_state(self, change: LinkChange) -> None:
        log_state(self.url, self.state, change)  # the child logs nothing of its own
        self.state = change.state
        if change.state is LinkState.CLOSED:
            with contextlib.suppress(queue.Full):
                self.items.put_nowait(change)
        else:
            self._put(change)
