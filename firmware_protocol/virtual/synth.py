"""Sample synthesis for the virtual instrument: taps in, channel volts out, chunk by chunk.

The exact closed-form response (response.py) is evaluated while a pulse is
acting. Once it has ended, every mode is a free damped oscillation, so the
response of chunk k+1 is that of chunk k advanced by one chunk duration: the
synthesiser keeps one complex amplitude per sensor and mode (all taps summed)
and multiplies by a precomputed decay table. The cost per chunk is then one
small matrix product, whatever the number of ringing taps.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from .modal import ModalModel
from .response import half_sine, modal_acceleration


@dataclass(frozen=True, slots=True)
class Pulse:
    """One force pulse on the structure. t0_s on the sample clock (sample k is at k/rate)."""

    point: str
    t0_s: float
    width_s: float
    peak_n: float

    @property
    def end_s(self) -> float:
        return self.t0_s + self.width_s


class ResponseSynth:
    """Force and sensor accelerations of a modal model, generated in consecutive chunks.

    rate_hz: sample rate. chunk: samples per call of `next_chunk`.
    """

    def __init__(self, model: ModalModel, rate_hz: float, chunk: int) -> None:
        self.model = model
        self.rate_hz = rate_hz
        self.chunk = chunk
        self.sensor_points: list[str] = list(model.sensors.values())
        w = model.omega
        zeta = model.damping_ratio
        self._w_d = w * np.sqrt(1.0 - zeta**2)
        self._lam = -zeta * w + 1j * self._w_d
        dt = 1.0 / rate_hz
        # decay[m, k] = exp(lam_m * k * dt) for k in 0..chunk-1, and the step per chunk.
        self._decay = np.exp(np.outer(self._lam, np.arange(chunk) * dt))
        self._step = np.exp(self._lam * chunk * dt)
        self._ringing = np.zeros((len(self.sensor_points), model.n_modes), dtype=np.complex128)
        self._pulses: list[Pulse] = []
        self.next_index = 0

    def reset(self) -> None:
        """Structure at rest, sample clock back to 0."""
        self._ringing[:] = 0.0
        self._pulses.clear()
        self.next_index = 0

    def move_sensor(self, channel: int, point: str) -> None:
        """Roving-sensor mode: response channel `channel` now sits at `point` (at rest)."""
        self.model.index(point)
        self.sensor_points[channel] = point
        self._ringing[channel] = 0.0

    def add(self, pulse: Pulse) -> None:
        """Schedule a pulse; it must not start before the next chunk."""
        if pulse.t0_s < self.next_index / self.rate_hz:
            raise ValueError("a pulse cannot start in a chunk already generated")
        self._pulses.append(pulse)

    def _free_amplitude(self, pulse: Pulse, t_ref: float) -> np.ndarray:
        """Complex amplitude (sensors, modes) of a pulse's free decay, referred to time t_ref.

        For t > end: a(t) = Re(amp @ exp(lam (t - t_ref))).
        """
        big_w = math.pi / pulse.width_s
        lam = self._lam
        i_end = big_w * (1.0 + np.exp(lam * pulse.width_s)) / (lam * lam + big_w * big_w)
        coef = lam * lam / (1j * self._w_d) * i_end * np.exp(lam * (t_ref - pulse.end_s))
        phi = self.model.shapes_at(self.sensor_points) * self.model.shape_at(pulse.point)
        amp: np.ndarray = phi * (coef * pulse.peak_n)[None, :]
        return amp

    def next_chunk(self) -> tuple[np.ndarray, np.ndarray]:
        """(force N (chunk,), acceleration m/s² (sensors, chunk)) of the next chunk."""
        n0 = self.next_index
        t = (n0 + np.arange(self.chunk)) / self.rate_hz
        t_next = (n0 + self.chunk) / self.rate_hz
        force = np.zeros(self.chunk)
        accel = (self._ringing @ self._decay).real
        handed_over = np.zeros_like(self._ringing)
        keep: list[Pulse] = []
        for p in self._pulses:
            if p.t0_s > t[-1]:
                keep.append(p)
                continue
            force += half_sine(t - p.t0_s, p.width_s, p.peak_n)
            if p.end_s >= t[-1]:
                accel += self._exact(p, t)
                keep.append(p)
                continue
            # Exact while the pulse acts, then its free decay joins the ringing amplitudes.
            acting = t <= p.end_s
            first_free = int(np.argmax(~acting))
            if first_free:
                accel[:, :first_free] += self._exact(p, t[:first_free])
            amp = self._free_amplitude(p, t[first_free])
            accel[:, first_free:] += (amp @ self._decay[:, : self.chunk - first_free]).real
            handed_over += amp * np.exp(self._lam * (t_next - t[first_free]))[None, :]
        self._pulses = keep
        self._ringing = self._ringing * self._step[None, :] + handed_over
        self.next_index = n0 + self.chunk
        return force, accel

    def _exact(self, p: Pulse, t: np.ndarray) -> np.ndarray:
        return modal_acceleration(
            self.model, p.point, t, p.t0_s, p.width_s, p.peak_n, sensor_points=self.sensor_points
        )


def pulse_train(
    point: str, t0_s: float, width_s: float, peak_n: float, echoes: Sequence[tuple[float, float]]
) -> list[Pulse]:
    """A main pulse and its echoes: (delay after the main pulse ends s, fraction of peak)."""
    out = [Pulse(point, t0_s, width_s, peak_n)]
    for delay, fraction in echoes:
        out.append(Pulse(point, t0_s + width_s + delay, width_s, peak_n * fraction))
    return out
