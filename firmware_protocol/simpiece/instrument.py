"""The simulated test piece: a simulated hammer-and-accelerometer device on a real link.

It speaks the binary protocol (or prints text lines) over a pseudo-terminal or
TCP, answers the host's commands, and streams the exact response of a modal
model to the taps a caller asks for, with sensor noise, ADC quantisation and
clipping. Faults (double hits, overloads, dropped frames, corrupted bytes, garbage,
unplug and replug, a stalled stream) can be switched on at any time.

Channel 0 is the force hammer; channels 1.. are the accelerometers, in the
order of the model's sensors.

This module is the piece's public face (start, close, tap, strike, move a
sensor, unplug and replug) and re-exports what callers import. Its parts:
settings.py (settings, faults, tap records, counters), core.py (state and
output queue), commands.py (the host's commands), converter.py (noise, ADC,
frames and frame faults) and stream.py (the thread and its pacing).
"""

from __future__ import annotations

import logging
import math
import threading
import time

from .modal import ModalModel
from .ports import Port, PtyPort, TcpPort
from .pulse import pulse_train
from .settings import (
    MAX_LAG_S,
    MAX_RATE_HZ,
    MAX_SPEED,
    MIN_RATE_HZ,
    Faults,
    InstrumentCounters,
    InstrumentSettings,
    TapRecord,
)
from .stream import PieceStream

__all__ = [
    "MAX_LAG_S",
    "MAX_RATE_HZ",
    "MAX_SPEED",
    "MIN_RATE_HZ",
    "Faults",
    "InstrumentCounters",
    "InstrumentSettings",
    "SimulatedPiece",
    "TapRecord",
    "open_simulated",
]

log = logging.getLogger(__name__)


class SimulatedPiece(PieceStream):
    """A simulated device. Create, `start()`, point a host at `url`, `tap()`, `close()`."""

    # --- public API ---------------------------------------------------------

    def start(self) -> SimulatedPiece:
        if self._thread is None:
            if self.settings.output == "text":  # a printing board streams from power-up
                with self._lock:
                    self._begin_stream()
            self._thread = threading.Thread(target=self._run, name="simulated-piece", daemon=True)
            self._thread.start()
        return self

    def close(self) -> None:
        """Stop the thread and close the port. Safe to call twice."""
        if self._closed:
            return
        self._closed = True
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout=5.0)
        self.port.close()

    def __enter__(self) -> SimulatedPiece:
        return self.start()

    def __exit__(self, *exc: object) -> None:
        self.close()

    def tap(
        self,
        point: str,
        force_n: float | None = None,
        width_s: float | None = None,
        *,
        double_hit: bool | None = None,
        overload: bool | None = None,
        unplug_after_s: float | None = None,
    ) -> TapRecord | None:
        """Strike `point` a few ms from now. None if the device is not streaming.

        double_hit / overload: force that fault for this tap; None lets the
        fault probabilities decide. unplug_after_s: pull the cable this long (device time)
        after the tap, e.g. before its record is complete, whatever the host's load.
        """
        self.model.index(point)
        s = self.settings
        peak = s.default_force_n if force_n is None else float(force_n)
        width = s.default_width_s if width_s is None else float(width_s)
        if not 0.0002 <= width <= 0.003:
            raise ValueError(f"pulse width {width} s; allowed 0.0002..0.003 s (hard to soft tip)")
        if peak <= 0.0:
            raise ValueError(f"peak force {peak} N; must be > 0")
        with self._lock:
            if not self._streaming:
                return None
            if double_hit is None:
                double_hit = bool(self._rng.random() < self.faults.double_hit_probability)
            if overload is None:
                overload = bool(self._rng.random() < self.faults.overload_probability)
            if overload:
                peak *= 25.0  # struck far too hard for the input range
            rate = self._rate_hz
            # A few ms ahead of the samples already generated, at a random sub-sample time.
            t0 = (self._synth.next_index + math.ceil(max(0.004, self._synth.lead_s) * rate)) / rate
            t0 += float(self._rng.uniform(0.0, 1.0 / rate))
            echoes = []
            if double_hit:
                # The hammer bounces back: a weaker second pulse 1.5 to 6 ms after the first.
                delay = float(self._rng.uniform(0.0015, 0.006))
                echoes.append((delay, float(self._rng.uniform(0.25, 0.5))))
            for pulse in pulse_train(point, t0, width, peak, echoes):
                self._synth.add(pulse)
            record = TapRecord(point, t0, math.ceil(t0 * rate), peak, width, double_hit, overload)
            self.counters.taps.append(record)
            if unplug_after_s is not None:
                self._unplug_at = record.first_index + math.ceil(unplug_after_s * rate)
        return record

    def strike(
        self,
        point: str,
        force_n: float | None = None,
        width_s: float | None = None,
        *,
        timeout_s: float = 30.0,
        unplug_after_s: float | None = None,
        **faults: bool | None,
    ) -> TapRecord | None:
        """`tap`, then wait until the tap's samples are sent; tap again if an overrun lost them.

        An operator whose tap the rig never saw (the converter overran: `InstrumentCounters.
        overruns`, and the host counts the samples lost) taps again. Tests and the demo use this
        so that a machine too busy to keep the simulation in real time costs a retry, not a hit.
        None if the device is not streaming; TimeoutError if the samples are not sent in time.
        """
        deadline = time.monotonic() + timeout_s
        while True:
            lost = self.counters.taps_lost
            record = self.tap(point, force_n, width_s, unplug_after_s=unplug_after_s, **faults)
            if record is None:
                return None
            end = record.first_index + math.ceil(record.width_s * self._rate_hz) + 1
            while True:
                with self._lock:  # the skip-ahead advances the index and counts under it
                    sent, now_lost = self._synth.next_index >= end, self.counters.taps_lost
                if sent or not self._streaming:
                    break
                if time.monotonic() > deadline:
                    raise TimeoutError(f"the tap at {point} was not sent within {timeout_s} s")
                self._stop.wait(0.002)
            if now_lost == lost:
                return record
            log.info("tap at %s lost to an overrun; tapping again", point)

    def move_sensor(self, response_label: str, point: str) -> None:
        """Roving-sensor mode: move an accelerometer to another point."""
        channel = list(self.model.sensors).index(response_label)
        with self._lock:
            self._synth.move_sensor(channel, point)

    def unplug(self) -> None:
        """Pull the cable: the link closes and the device loses power (it comes back idle)."""
        self._request("unplug")

    def replug(self) -> None:
        """Plug the cable back in; returns once the device end can be opened again."""
        self._request("replug")

    def _request(self, what: str) -> None:
        done = threading.Event()
        self._requests.put((what, done))
        if self._thread is not None and self._thread.is_alive():
            done.wait(timeout=5.0)


def open_simulated(
    transport: str = "pty",
    *,
    link: str | None = None,
    model: ModalModel | None = None,
    settings: InstrumentSettings | None = None,
) -> SimulatedPiece:
    """A started simulated test piece on a new pty (optionally behind symlink `link`) or a TCP
    port."""
    if transport not in ("pty", "tcp"):
        raise ValueError(f"transport {transport!r}; allowed pty, tcp")
    port: Port = PtyPort(link) if transport == "pty" else TcpPort()
    return SimulatedPiece(model, settings, port).start()
