"""The serial link: one reader thread owns the port and hands bytes over a bounded queue.

Any pyserial URL works (/dev/ttyACM0, socket://host:port, rfc2217://...). The
reader reconnects after an unplug, a read error or a stall, with capped
exponential backoff, and reports each state change in the same queue as the
bytes, so the consumer sees them in stream order.
"""

from __future__ import annotations

import contextlib
import enum
import logging
import queue
import threading
import time
from dataclasses import dataclass
from typing import Any, Self

import serial

log = logging.getLogger(__name__)

# A read returns after this long with whatever has arrived (or sooner with 64 KiB): it
# bounds the latency from a byte's arrival to its hand-over, and batches a fast stream
# into a few hundred reads a second instead of thousands of tiny ones.
READ_TIMEOUT_S = 0.02  # s
READ_SIZE = 1 << 16  # bytes
BACKOFF_FIRST_S = 0.05
BACKOFF_MAX_S = 2.0


class LinkState(enum.Enum):
    CONNECTING = "connecting"
    CONNECTED = "connected"
    DISCONNECTED = "disconnected"
    STALLED = "stalled"
    CLOSED = "closed"


@dataclass(frozen=True, slots=True)
class LinkChange:
    """A state change of the link; `detail` says why, in words."""

    state: LinkState
    detail: str


Item = bytes | LinkChange


def log_state(url: str, was: LinkState, change: LinkChange) -> None:
    """Log a link's state change: at info, but repeated failures to open at debug."""
    if change.state is was and was is LinkState.DISCONNECTED:
        log.debug("%s %s: %s", url, change.state.value, change.detail)
    else:
        log.info("device link %s: %s", change.state.value, change.detail)


class LinkBase:
    """What every link offers the rig: `items` (bytes and LinkChange values in stream order),
    `state`, `reconnects` and `dropped_chunks`, and one worker thread (`_run`)."""

    thread_name = "link"

    def __init__(
        self,
        url: str,
        *,
        baudrate: int = 921_600,
        stall_after_s: float = 2.0,
        queue_chunks: int = 4096,
    ) -> None:
        self.url = url
        self.baudrate = baudrate
        self.stall_after_s = stall_after_s
        self.items: queue.Queue[Item] = queue.Queue(maxsize=queue_chunks)
        self.state = LinkState.CONNECTING
        self.dropped_chunks = 0
        self.reconnects = 0
        self._write_lock = threading.Lock()
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name=self.thread_name, daemon=True)
        self._closed = False

    def start(self) -> Self:
        self._thread.start()
        return self

    def _run(self) -> None:
        raise NotImplementedError


class SerialLink(LinkBase):
    """Reads a pyserial URL in its own thread. `items` yields bytes and LinkChange values."""

    thread_name = "serial-reader"

    def __init__(self, url: str, **options: Any) -> None:
        super().__init__(url, **options)
        self._port: serial.Serial | None = None
        self._kick = threading.Event()
        self._kick_reason = ""
        self._kick_only_stalled = False

    def close(self) -> None:
        """Stop the reader and close the port. Safe to call twice."""
        if self._closed:
            return
        self._closed = True
        self._stop.set()
        if self._thread.is_alive():
            self._thread.join(timeout=5.0)
        self._close_port()
        self._set_state(LinkState.CLOSED, "closed by the host")

    def send(self, data: bytes) -> bool:
        """Write to the device; False (nothing sent) while it is not connected."""
        with self._write_lock:
            port = self._port
            if port is None:
                return False
            try:
                port.write(data)
                return True
            except (serial.SerialException, OSError) as exc:
                log.debug("write to %s failed: %s", self.url, exc)
                return False

    def reconnect(self, why: str, *, only_if_stalled: bool = False) -> None:
        """Ask the reader to drop the port and open it again. only_if_stalled: unless bytes
        have come since the stall was reported (the asker may be acting on a stale report,
        e.g. after its process was frozen; reopening would throw the flowing data away)."""
        self._kick_reason, self._kick_only_stalled = why, only_if_stalled
        self._kick.set()

    # --- reader thread ------------------------------------------------------

    def _run(self) -> None:
        backoff = BACKOFF_FIRST_S
        while not self._stop.is_set():
            if not self._open():
                self._stop.wait(backoff)
                backoff = min(backoff * 2.0, BACKOFF_MAX_S)
                continue
            backoff = BACKOFF_FIRST_S
            self._read_until_lost()
            self._close_port()

    def _open(self) -> bool:
        try:
            # Every backend (tty, socket://, rfc2217://) has Serial's read interface. A tty is
            # locked for this reader alone (flock; the network backends ignore it): a second
            # reader of the same tty would take bytes from this one, and a reader retrying a
            # path its device left (/dev/pts/N is handed to the next pty at once) would too.
            port = serial.serial_for_url(
                self.url, baudrate=self.baudrate, timeout=READ_TIMEOUT_S, exclusive=True
            )
        except (serial.SerialException, OSError, ValueError) as exc:
            busy = "; another program reads this port" if "exclusively lock" in str(exc) else ""
            self._set_state(LinkState.DISCONNECTED, f"cannot open {self.url}: {exc}{busy}")
            return False
        with self._write_lock:
            self._port = port
        if self.state is not LinkState.CONNECTING:
            self.reconnects += 1
        self._set_state(LinkState.CONNECTED, f"opened {self.url}")
        return True

    def _read_until_lost(self) -> None:
        port = self._port
        assert port is not None
        last_data = time.monotonic()
        stalled = False
        while not self._stop.is_set():
            if self._kick.is_set():
                self._kick.clear()
                if stalled or not self._kick_only_stalled:
                    why = self._kick_reason or "reset by the host"
                    self._set_state(LinkState.DISCONNECTED, why)
                    return
                log.debug("%s: not reopened, bytes flow again", self.url)
            try:
                data = port.read(READ_SIZE)
            except (serial.SerialException, OSError) as exc:
                self._set_state(LinkState.DISCONNECTED, f"lost {self.url}: {exc}")
                return
            now = time.monotonic()
            if data:
                last_data = now
                if stalled:
                    stalled = False
                    self._set_state(LinkState.CONNECTED, "data flowing again")
                self._hand_over(data)
            elif not stalled and now - last_data > self.stall_after_s:
                stalled = True
                self._set_state(LinkState.STALLED, f"no bytes for {self.stall_after_s:g} s")

    def _hand_over(self, data: bytes) -> None:
        try:
            self.items.put(data, timeout=0.5)
        except queue.Full:
            # The consumer has fallen far behind; losing bytes here shows up
            # downstream as a gap in the sample index, never as wrong samples.
            self.dropped_chunks += 1

    def _close_port(self) -> None:
        with self._write_lock:
            port, self._port = self._port, None
        if port is not None:
            with contextlib.suppress(serial.SerialException, OSError):
                port.close()

    def _set_state(self, state: LinkState, detail: str) -> None:
        log_state(self.url, self.state, LinkChange(state, detail))
        self.state = state
        with contextlib.suppress(queue.Full):
            self.items.put_nowait(LinkChange(state, detail))
