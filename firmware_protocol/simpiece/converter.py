"""The simulated test piece's converter front end: noise, ADC quantisation, clipping, frames.

Turns a chunk of force and accelerations into sample codes (sensor noise at the
ADC input, rounding to the converter's bits, clipping and the overload flags),
then into a DATA frame or text lines, applying the frame faults (dropped,
corrupted, garbage) and the device buffer's overrun on the way.
"""

from __future__ import annotations

import math

import numpy as np

from .. import frames as fr
from ..text import format_lines
from .core import PieceCore


class PieceConverter(PieceCore):
    """Samples to codes to frames, with the switchable frame faults."""

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
        if self._sent is not None:
            self._sent[first] = codes.copy()
        if self.settings.output == "text":
            self._queue(format_lines(codes.T))
            return
        if self._rng.random() < self.faults.drop_frame_probability:
            self.counters.frames_dropped += 1
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
