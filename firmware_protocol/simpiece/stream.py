"""The simulated test piece's thread: its loop, pacing, plug requests and housekeeping.

One thread owns the port. It serves unplug/replug requests, waits for the host's
bytes or the next frame's due time, paces the chunks at `speed` times real
time (catching up, slowing down or overrunning when the host is starved), and
sends INFO and STATUS at their intervals.
"""

from __future__ import annotations

import logging
import queue
import select
import time

from .. import frames as fr
from ..binary import BinaryDecoder
from ..encoder import FrameEncoder
from ..text import RATE_QUERY
from .commands import PieceCommands
from .converter import PieceConverter
from .settings import MAX_LAG_S

log = logging.getLogger(__name__)


class PieceStream(PieceCommands, PieceConverter):
    """The device's thread (`_run`); `SimulatedPiece` starts and stops it."""

    def _run(self) -> None:
        try:
            while not self._stop.is_set():
                self._serve_requests()
                self._wait_and_read()
                now = time.monotonic()
                if self._streaming and self.port.connected:
                    self._stream(now)
                if self.port.connected:
                    self._housekeeping(now)
                    self._flush()
        except Exception:  # the simulated device must never die silently
            log.exception("simulated test piece thread failed")
            raise

    def _serve_requests(self) -> None:
        while True:
            try:
                req, done = self._requests.get_nowait()
            except queue.Empty:
                return
            if req == "unplug":
                self._pull_cable()
            elif req == "replug":
                self.port.replug()
                if self.settings.output == "text":
                    self._begin_stream()
            done.set()

    def _pull_cable(self) -> None:
        self.port.unplug()
        with self._lock:
            self._power_off()

    def _power_off(self) -> None:
        self._unplug_at = None
        self._streaming = False
        self._pending.clear()
        self._synth.reset()
        self._enc = FrameEncoder()
        self._decoder = BinaryDecoder()

    def _wait_and_read(self) -> None:
        fd = self.port.fileno()
        if self._streaming:
            period = self.settings.frame_samples / self._rate_hz / self.settings.speed
            due = self._t_start + (self._chunks + 1) * period
            timeout = max(0.0, min(0.05, due - time.monotonic()))
        else:
            timeout = 0.05
        wfds = [fd] if (fd is not None and self._pending) else []
        if fd is None:
            self._stop.wait(timeout)
            return
        readable, _, _ = select.select([fd], wfds, [], timeout)
        if readable:
            if not self.port.accept_pending():
                return
            data = self.port.read()
            if data and self.settings.output == "binary":
                self._handle_input(data)
            elif data and RATE_QUERY.strip() in data and self.settings.answers_rate_query:
                self._send_info(time.monotonic())  # a text board asked to repeat its rate

    def _housekeeping(self, now: float) -> None:
        if not self._streaming or self.faults.stalled:
            return
        if now - self._last_info >= self.settings.info_interval_s:
            self._send_info(now)
        if self._overload_mask or now - self._last_status >= self.settings.status_interval_s:
            self._send_status(now)

    def _send_status(self, now: float) -> None:
        self._last_status = now
        if self.settings.output == "binary":
            status = fr.Status(
                self._synth.next_index, self._overload_mask, self._streaming, self.counters.overruns
            )
            self._queue(self._enc.status(status))
        self._overload_mask = 0

    def _stream(self, now: float) -> None:
        period = self.settings.frame_samples / self._rate_hz
        speed = self.settings.speed
        behind = int((now - self._t_start) * speed / period) - self._chunks
        if speed != 1.0 and behind * period / speed > MAX_LAG_S:
            # A sped-up piece on a host too busy for it slows down rather than lose samples:
            # its clock is simulated, so falling behind has no physical meaning.
            self._t_start = now - self._chunks * period / speed
            behind = 1
        if behind * period > MAX_LAG_S:  # starved past the FIFO: the converter overran, skip
            with self._lock:
                skipped_from = self._synth.next_index
                for _ in range(behind - 1):
                    self._synth.next_chunk()
                self._count_lost_taps(skipped_from, self._synth.next_index)
            self._chunks += behind - 1
            self.counters.overruns += 1
            behind = 1
        for _ in range(max(0, behind)):
            if len(self._pending) > self.settings.device_buffer_bytes:
                # The link buffer is full (the host is not reading, or the piece is catching
                # up after being starved itself): the samples wait in the converter's FIFO,
                # which overruns above (counted, samples skipped) once it holds MAX_LAG_S.
                break
            if self._unplug_at is not None and self._synth.next_index >= self._unplug_at:
                self._pull_cable()  # as a tap asked: at this sample, however busy the host
                return
            first = self._synth.next_index
            with self._lock:
                force, accel = self._synth.next_chunk()
            self._chunks += 1
            codes = self._quantise(force, accel)
            if self.faults.stalled:
                continue
            self._emit_chunk(first, codes)
            self._flush()  # a catch-up after a starved spell drains as the host reads
