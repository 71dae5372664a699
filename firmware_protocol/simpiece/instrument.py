"""The simulated test piece: a simulated hammer-and-accelerometer device on a real link.

It speaks the binary protocol (or prints text lines) over a pseudo-terminal or
TCP, answers the host's commands, and streams the exact response of a modal
model to the taps a caller asks for, with sensor noise, ADC quantisation and
clipping. Faults (double hits, overloads, dropped frames, corrupted bytes, garbage,
unplug and replug, a stalled stream) can be switched on at any time.

Channel 0 is the force hammer; channels 1.. are the accelerometers, in the
order of the model's sensors.
"""

from __future__ import annotations

import logging
import math
import queue
import select
import threading
import time
from dataclasses import dataclass, field

import numpy as np

from .. import frames as fr
from ..binary import BinaryDecoder
from ..encoder import FrameEncoder
from ..events import BadCommand, CommandReceived
from ..text import RATE_QUERY, format_lines, rate_comment
from .modal import ModalModel, demo_panel
from .ports import Port, PtyPort, TcpPort
from .synth import ResponseSynth, pulse_train

log = logging.getLogger(__name__)

MAX_LAG_S = 5.0  # s of samples the simulated converter's FIFO holds while the host is starved

MAX_SPEED = 16.0  # simulated seconds per wall second at most; beyond it a host cannot keep up
MIN_RATE_HZ = 1000.0
MAX_RATE_HZ = 204_800.0


@dataclass(frozen=True)
class InstrumentSettings:
    """How the simulated device is built. Sensitivities as on a calibration sheet."""

    rate_hz: float = 51_200.0
    sample_format: fr.SampleFormat = fr.SampleFormat.INT24
    adc_bits: int = 24
    full_scale_v: float = 5.0  # ±5 V input range, common for IEPE DAQ front ends
    hammer_mv_per_n: float = 2.25  # a general-purpose impact hammer (common practice)
    accel_mv_per_ms2: float = 1.02  # 10 mV/g, a light accelerometer for thin panels
    noise_v_rms: float = 20e-6  # per channel, at the ADC input
    frame_samples: int = 256  # 5 ms per DATA frame at 51.2 kHz
    output: str = "binary"  # or "text"
    device_id: str = "SIMULATED-PANEL"
    firmware: str = "sim-1"
    default_force_n: float = 30.0
    default_width_s: float = 0.0008  # a medium (plastic) tip
    info_interval_s: float = 1.0  # s between INFO (binary) or rate lines (text); inf: once
    answers_rate_query: bool = True  # text: a "?rate" line from the host repeats the rate line
    status_interval_s: float = 0.25
    device_buffer_bytes: int = 262_144  # what the device can hold while the host is not reading
    seed: int = 0
    # The converter's linear-phase anti-alias filter on every channel (synth.converter_filter);
    # False point-samples the continuous signals, so content above Nyquist folds back.
    anti_alias: bool = True
    # Simulated seconds per wall-clock second: above 1 the piece runs faster than real time
    # (the demo), so a tap's record arrives in a fraction of its length. 1 is a real device.
    speed: float = 1.0


@dataclass
class Faults:
    """Switchable faults; change any field at any time from any thread."""

    double_hit_probability: float = 0.0
    overload_probability: float = 0.0
    drop_frame_probability: float = 0.0
    corrupt_probability: float = 0.0  # per frame: one byte flipped
    garbage_probability: float = 0.0  # per frame: sent as random bytes of the same length
    stalled: bool = False  # the device sends nothing at all; its sample clock runs on


@dataclass(frozen=True, slots=True)
class TapRecord:
    """What the instrument did for one tap request (the ground truth of a hit)."""

    point: str
    t0_s: float
    first_index: int
    peak_n: float
    width_s: float
    double_hit: bool
    overload: bool


@dataclass
class InstrumentCounters:
    frames_sent: int = 0
    frames_dropped: int = 0
    frames_corrupted: int = 0
    overruns: int = 0
    taps_lost: int = 0  # taps whose samples an overrun skipped: the host never saw them
    bytes_sent: int = 0
    commands: int = 0
    taps: list[TapRecord] = field(default_factory=list)


class SimulatedPiece:
    """A simulated device. Create, `start()`, point a host at `url`, `tap()`, `close()`."""

    def __init__(
        self,
        model: ModalModel | None = None,
        settings: InstrumentSettings | None = None,
        port: Port | None = None,
    ) -> None:
        self.model = model if model is not None else demo_panel()
        self.settings = settings if settings is not None else InstrumentSettings()
        if self.settings.output not in ("binary", "text"):
            raise ValueError(f"output {self.settings.output!r}; allowed binary, text")
        if not 0.0 < self.settings.speed <= MAX_SPEED:
            raise ValueError(f"speed {self.settings.speed!r}; allowed above 0 up to {MAX_SPEED:g}")
        self.port: Port = port if port is not None else PtyPort()
        self.faults = Faults()
        self.counters = InstrumentCounters()
        self._rng = np.random.default_rng(self.settings.seed)
        self._lock = threading.Lock()
        self._rate_hz = self.settings.rate_hz
        self._synth = ResponseSynth(
            self.model, self._rate_hz, self.settings.frame_samples, self.settings.anti_alias
        )
        self._enc = FrameEncoder()
        self._decoder = BinaryDecoder()
        self._pending = bytearray()
        self._streaming = False
        self._t_start = 0.0
        self._chunks = 0
        self._overload_mask = 0
        self._last_info = 0.0
        self._last_status = 0.0
        self._requests: queue.SimpleQueue[tuple[str, threading.Event]] = queue.SimpleQueue()
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._closed = False

    # --- public API ---------------------------------------------------------

    @property
    def url(self) -> str:
        """What to give pyserial's serial_for_url (a tty path or socket://host:port)."""
        return self.port.url

    @property
    def rate_hz(self) -> float:
        return self._rate_hz

    @property
    def streaming(self) -> bool:
        return self._streaming

    @property
    def channel_labels(self) -> tuple[str, ...]:
        return ("hammer", *self.model.sensors.keys())

    def sensitivities(self) -> tuple[float, ...]:
        """Per channel, volts per N (hammer) or per m/s² (accelerometers)."""
        s = self.settings
        n_resp = len(self.model.sensors)
        return (s.hammer_mv_per_n / 1000.0,) + (s.accel_mv_per_ms2 / 1000.0,) * n_resp

    def device_info(self) -> fr.DeviceInfo:
        s = self.settings
        return fr.DeviceInfo(
            protocol_version=fr.PROTOCOL_VERSION,
            sample_format=s.sample_format,
            rate_milli_hz=round(self._rate_hz * 1000),
            device_id=s.device_id,
            firmware=s.firmware,
            channels=tuple(fr.ChannelInfo(s.full_scale_v, s.adc_bits) for _ in self.channel_labels),
        )

    def start(self) -> SimulatedPiece:
        if self._thread is None:
            if self.settings.output == "text":  # a printing board streams from power-up
                with self._lock:
                    self._begin_stream()
            self._thread = threading.Thread(
                target=self._run, name="simulated-piece", daemon=True
            )
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
    ) -> TapRecord | None:
        """Strike `point` a few ms from now. None if the device is not streaming.

        double_hit / overload: force that fault for this tap; None lets the
        fault probabilities decide.
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
        return record

    def strike(
        self,
        point: str,
        force_n: float | None = None,
        width_s: float | None = None,
        *,
        timeout_s: float = 30.0,
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
            record = self.tap(point, force_n, width_s, **faults)
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

    # --- the instrument thread ---------------------------------------------

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
                self.port.unplug()
                with self._lock:
                    self._power_off()
            elif req == "replug":
                self.port.replug()
                if self.settings.output == "text":
                    self._begin_stream()
            done.set()

    def _power_off(self) -> None:
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

    def _handle_input(self, data: bytes) -> None:
        for event in self._decoder.feed(data):
            if isinstance(event, CommandReceived):
                self.counters.commands += 1
                self._command(event.command)
            elif isinstance(event, BadCommand):
                self.counters.commands += 1
                self._queue(
                    self._enc.ack(fr.Ack(event.opcode, fr.AckResult(event.result), event.tag))
                )

    def _command(self, cmd: fr.Command) -> None:
        ok, busy = fr.AckResult.OK, fr.AckResult.BUSY
        if cmd.opcode is fr.Opcode.START:
            self._queue(self._enc.ack(fr.Ack(cmd.opcode, ok, cmd.tag)))
            with self._lock:
                self._synth.reset()
                self._begin_stream()
        elif cmd.opcode is fr.Opcode.STOP:
            self._streaming = False
            self._queue(self._enc.ack(fr.Ack(cmd.opcode, ok, cmd.tag)))
        elif cmd.opcode is fr.Opcode.SET_RATE:
            rate = cmd.argument / 1000.0
            if self._streaming:
                self._queue(self._enc.ack(fr.Ack(cmd.opcode, busy, cmd.tag)))
            elif not MIN_RATE_HZ <= rate <= MAX_RATE_HZ:
                bad = fr.AckResult.BAD_ARGUMENT
                self._queue(self._enc.ack(fr.Ack(cmd.opcode, bad, cmd.tag)))
            else:
                with self._lock:
                    self._rate_hz = rate
                    self._synth = ResponseSynth(
                        self.model, rate, self.settings.frame_samples, self.settings.anti_alias
                    )
                self._queue(self._enc.ack(fr.Ack(cmd.opcode, ok, cmd.tag, cmd.argument)))
        elif cmd.opcode is fr.Opcode.PING:
            self._queue(self._enc.ack(fr.Ack(cmd.opcode, ok, cmd.tag, cmd.argument)))
        elif cmd.opcode is fr.Opcode.IDENTIFY:
            self._queue(self._enc.ack(fr.Ack(cmd.opcode, ok, cmd.tag)))
            self._send_info(time.monotonic())

    def _begin_stream(self) -> None:
        self._streaming = True
        self._t_start = time.monotonic()
        self._chunks = 0
        self._send_info(self._t_start)

    def _send_info(self, now: float) -> None:
        self._last_info = now
        if self.settings.output == "text":
            self._queue(rate_comment(self._rate_hz))
        else:
            self._queue(self._enc.info(self.device_info()))

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
        for k in range(max(0, behind)):
            if (k or behind > 1) and len(self._pending) > self.settings.device_buffer_bytes:
                break  # catching up: the rest waits until the host has read this much
            first = self._synth.next_index
            with self._lock:
                force, accel = self._synth.next_chunk()
            self._chunks += 1
            codes = self._quantise(force, accel)
            if self.faults.stalled:
                continue
            self._emit_chunk(first, codes)
            self._flush()  # a catch-up after a starved spell drains as the host reads

    def _count_lost_taps(self, first: int, end: int) -> None:
        """Taps whose pulse touches samples first..end-1, which are never sent."""
        for tap in reversed(self.counters.taps):
            tap_end = tap.first_index + math.ceil(tap.width_s * self._rate_hz) + 1
            if tap_end <= first:
                break
            if tap.first_index < end:
                self.counters.taps_lost += 1

    def _quantise(self, force: np.ndarray, accel: np.ndarray) -> np.ndarray:
        """(n, channels) sample codes (or volts for float32), with noise and clipping."""
        s = self.settings
        out: np.ndarray
        sens = np.asarray(self.sensitivities())
        volts = np.vstack([force[None, :], accel]) * sens[:, None]
        volts += self._rng.normal(0.0, s.noise_v_rms, size=volts.shape)
        if s.output == "text" or s.sample_format is fr.SampleFormat.FLOAT32:
            clipped = np.clip(volts, -s.full_scale_v, s.full_scale_v)
            over = np.any(np.abs(volts) >= s.full_scale_v, axis=1)
            out = clipped.T
        else:
            full = float(1 << (s.adc_bits - 1))
            codes = np.rint(volts * (full / s.full_scale_v))
            over = np.any((codes >= full - 1) | (codes <= -full), axis=1)
            out = np.clip(codes, -full, full - 1).astype(np.int32).T
        for c in np.flatnonzero(over):
            self._overload_mask |= 1 << int(c)
        return out

    def _emit_chunk(self, first: int, codes: np.ndarray) -> None:
        if self.settings.output == "text":
            self._queue(format_lines(codes.T))
            return
        if self._rng.random() < self.faults.drop_frame_probability:
            self.counters.frames_dropped += 1
            return
        if len(self._pending) > self.settings.device_buffer_bytes:
            self.counters.overruns += 1  # the host is not reading: the device drops the frame
            with self._lock:
                self._count_lost_taps(first, first + codes.shape[0])
            return
        data = self._enc.data(first, codes, self.settings.sample_format)
        if self._rng.random() < self.faults.corrupt_probability:
            raw = bytearray(data)
            raw[int(self._rng.integers(0, len(raw)))] ^= int(self._rng.integers(1, 256))
            data = bytes(raw)
            self.counters.frames_corrupted += 1
        # Drawn only when switched on, so the other faults' random sequence stays as it was.
        if self.faults.garbage_probability and self._rng.random() < self.faults.garbage_probability:
            data = self._rng.bytes(len(data))  # line noise, a wrong baud rate, a foreign device
            self.counters.frames_corrupted += 1
        self.counters.frames_sent += 1
        self._queue(data)

    def _queue(self, data: bytes) -> None:
        self._pending += data

    def _flush(self) -> None:
        while self._pending:
            with memoryview(self._pending) as view:
                n = self.port.write(view)
            if n <= 0:
                return
            self.counters.bytes_sent += n
            del self._pending[:n]


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
