"""The simulated test piece's state: its parts, what it reports about itself, its output queue.

`PieceCore` builds the model, synthesiser, encoder and port from the settings,
answers what the host may ask about the device (rate, channels, sensitivities,
DEVICE_INFO), and queues bytes for the port, writing them as the port accepts
them. The command handling (commands.py), the converter front end
(converter.py) and the streaming thread (stream.py) build on it.
"""

from __future__ import annotations

import itertools
import queue
import threading
import time

import numpy as np

from .. import frames as fr
from ..binary import BinaryDecoder
from ..encoder import FrameEncoder
from ..text import rate_comment
from .modal import ModalModel, demo_panel
from .ports import Port, PtyPort
from .settings import MAX_SPEED, Faults, InstrumentCounters, InstrumentSettings
from .synth import ResponseSynth


class PieceCore:
    """The parts and state of a simulated device (see `SimulatedPiece` for its use)."""

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
        self._unplug_at: int | None = None  # sample index at which the cable is to be pulled
        self._last_info = 0.0
        self._last_status = 0.0
        self._requests: queue.SimpleQueue[tuple[str, threading.Event]] = queue.SimpleQueue()
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._closed = False
        self._sent: dict[int, np.ndarray] | None = None  # first index -> codes, once kept

    def keep_sent(self) -> None:
        """From now on, remember every chunk's samples as converted (codes, or volts for
        float32 and text), before any frame fault, for `sent` (tests)."""
        if self._sent is None:
            self._sent = {}

    def sent(self, first: int, n: int) -> np.ndarray | None:
        """(n, channels) samples the converter made for indexes first..first+n-1 (`keep_sent`),
        or None when some of them were not kept."""
        chunks = sorted(dict(self._sent or {}).items())
        parts = [(f, c) for f, c in chunks if f < first + n and f + len(c) > first]
        if not parts or parts[0][0] > first:
            return None
        if any(f + len(c) != g for (f, c), (g, _) in itertools.pairwise(parts)):
            return None
        held = np.concatenate([c for _, c in parts])
        start = first - parts[0][0]
        return held[start : start + n] if start + n <= len(held) else None

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
