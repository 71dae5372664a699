"""Sample synthesis for the simulated test piece: taps in, channel signals out, chunk by chunk.

The exact closed-form response (response.py) is evaluated while a pulse is
acting. Once it has ended, every mode is a free damped oscillation, so the
response of chunk k+1 is that of chunk k advanced by one chunk duration: the
synthesiser keeps one complex amplitude per sensor and mode (all taps summed)
and multiplies by a precomputed decay table. The cost per chunk is then one
small matrix product, whatever the number of ringing taps.

Anti-alias filter (optional, `AntiAliasFilter`). A converter front end does not
point-sample its input: a sigma-delta converter samples R times faster and
decimates with a sharp linear-phase FIR low-pass, so nothing above Nyquist
folds into the samples. With a filter, output sample k is

    y[k] = sum_j h[j] x(t_k + lag_j),   lag_j = (half - j) / (R rate),
    t_k = k / rate,  j = 0 .. L-1,  half = (L - 1) / 2,

the continuous signal x sampled R times finer, filtered with the taps h and
decimated, its group delay of `half` fine samples compensated so that y[k]
still stands for time k / rate (PROTOCOL.md §3). Between and around pulses x
is a sum of complex exponentials: per pulse of width T starting at t0, with
tau = t - t0, W = pi / T and modal poles lambda_r,

    0                                                   tau < 0
    Re(alpha e^{iW tau}) + Re(sum_r beta_r e^{lambda_r tau})   0 <= tau <= T
    Re(sum_r delta_r e^{lambda_r (tau - T)})                    tau > T

(coefficients from the closed form in response.py; the force is
Re(-i F0 e^{iW tau}) while the pulse acts). The filter sum of each piece is a
partial sum of h[j] e^{z lag_j} over the taps whose fine samples fall in the
piece, so the synthesiser keeps the running sums C_z[j] = sum_{j' < j} h[j']
e^{z lag_j'} for every mode pole (and, per pulse, for +-iW) and evaluates
y[k] at the kept output samples only, with two table look-ups per mode. Once
a pulse has ended a filter reach (half fine samples) ago, every tap sees the
free decay, and the filtered decay is Re(G(lambda) a e^{lambda t}) with the
filter's transfer function G(lambda) = C_lambda[L]: the pulse's amplitudes
join the ringing amplitudes multiplied by G, at no further cost. The result is
the same as oversampling everything by R and filtering (to float rounding);
the chunks no pulse touches cost what the unfiltered synthesis costs. The
filter's state across chunks is the pulse list and the filtered ringing
amplitudes, so the output does not depend on the chunk length.
"""

from __future__ import annotations

import math

import numpy as np

from .antialias import AntiAliasFilter, FloatArray, converter_filter, kaiser_beta
from .modal import ModalModel
from .pulse import Pulse, pulse_train
from .response import half_sine, modal_acceleration

__all__ = [
    "AntiAliasFilter",
    "Pulse",
    "ResponseSynth",
    "converter_filter",
    "kaiser_beta",
    "pulse_train",
]


class ResponseSynth:
    """Force and sensor accelerations of a modal model, generated in consecutive chunks.

    rate_hz: sample rate. chunk: samples per call of `next_chunk`.
    anti_alias: False for point samples of the continuous signals (exact closed
        form at k / rate); True for the converter's filter (`converter_filter`);
        or an `AntiAliasFilter` to use. Force and responses pass the same filter.
        With a filter every mode must have zeta·omega·lead_s <= 700 (float range of
        the running sums), true unless a mode far above the rate is nearly critical.
    """

    def __init__(
        self,
        model: ModalModel,
        rate_hz: float,
        chunk: int,
        anti_alias: bool | AntiAliasFilter = False,
    ) -> None:
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
        self.anti_alias: AntiAliasFilter | None
        if isinstance(anti_alias, AntiAliasFilter):
            self.anti_alias = anti_alias
        else:
            self.anti_alias = converter_filter() if anti_alias else None
        # Filter tables (see the module docstring); trivial without a filter.
        self._reach = 0.0  # s
        self._lag = np.zeros(1)  # lag_j, s, shape (L,)
        self._run_lam = np.zeros((model.n_modes, 2), dtype=np.complex128)
        self._gain = np.ones(model.n_modes, dtype=np.complex128)  # G(lambda_m)
        if self.anti_alias is not None:
            f = self.anti_alias
            self._reach = f.reach_s(rate_hz)
            # The running sums hold e^{lambda lag} up to e^{zeta w reach}: keep it in range.
            if float(np.max(zeta * w)) * self._reach > 700.0:
                raise ValueError(
                    "a mode decays too fast for the anti-alias filter's reach at this rate "
                    "(zeta·omega·reach > 700); lower its damping or raise the rate"
                )
            self._lag = (f.half - np.arange(f.length)) / (f.oversample * rate_hz)
            # _run_lam[m, j] = sum_{j' < j} h[j'] e^{lambda_m lag_j'}, j = 0..L, shape
            # (modes, L + 1); its last column is G(lambda_m).
            terms = f.taps[None, :] * np.exp(np.outer(self._lam, self._lag))
            self._run_lam = np.zeros((model.n_modes, f.length + 1), dtype=np.complex128)
            np.cumsum(terms, axis=1, out=self._run_lam[:, 1:])
            self._gain = self._run_lam[:, -1].copy()

    @property
    def lead_s(self) -> float:
        """A pulse starting this long (s) or more after the next chunk is rendered exactly.

        0 without a filter. With one, a pulse starting sooner is still rendered
        from the next chunk on, but the filter's precursor that would have fallen
        in samples already generated is missing.
        """
        return self._reach

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
        """Schedule a pulse; it must not start before the next chunk (see `lead_s`)."""
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
        if self.anti_alias is not None:
            return self._next_filtered_chunk(self.anti_alias)
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

    def _next_filtered_chunk(self, filt: AntiAliasFilter) -> tuple[np.ndarray, np.ndarray]:
        """`next_chunk` through the anti-alias filter (see the module docstring)."""
        n0 = self.next_index
        k = n0 + np.arange(self.chunk)
        t = k / self.rate_hz
        t_next = (n0 + self.chunk) / self.rate_hz
        reach = self._reach
        force = np.zeros(self.chunk)
        # The ringing amplitudes are already filtered (times the modal gains G).
        accel = (self._ringing @ self._decay).real
        handed_over = np.zeros_like(self._ringing)
        keep: list[Pulse] = []
        for p in self._pulses:
            if t[-1] + reach <= p.t0_s:  # no tap of the filter reaches the pulse yet
                keep.append(p)
                continue
            # From end + reach on, every tap sees the free decay.
            free = t - reach >= p.end_s
            first_free = int(np.argmax(free)) if free[-1] else self.chunk
            first_near = int(np.argmax(t + reach > p.t0_s))
            if first_free > first_near:
                near = slice(first_near, first_free)
                f_near, a_near = self._filtered_pulse(filt, p, k[near])
                force[near] += f_near
                accel[:, near] += a_near
            if first_free == self.chunk:
                keep.append(p)
                continue
            amp = self._free_amplitude(p, t[first_free]) * self._gain[None, :]
            accel[:, first_free:] += (amp @ self._decay[:, : self.chunk - first_free]).real
            handed_over += amp * np.exp(self._lam * (t_next - t[first_free]))[None, :]
        self._pulses = keep
        self._ringing = self._ringing * self._step[None, :] + handed_over
        self.next_index = n0 + self.chunk
        return force, accel

    def _filtered_pulse(
        self, filt: AntiAliasFilter, p: Pulse, k: np.ndarray
    ) -> tuple[FloatArray, FloatArray]:
        """Filtered force (n,) N and accelerations (sensors, n) m/s² of one pulse at samples k.

        y[k] = sum_j h[j] x(t_k + lag_j) for the piecewise-exponential x of the module
        docstring: taps j < a see the free decay, a <= j < b the acting pulse, j >= b
        the structure at rest before it. Valid for any k; k: (n,) int sample indices.
        """
        fine_rate = filt.oversample * self.rate_hz
        length = filt.length
        # Tap j's fine sample is at tau_j = t_k + lag_j - t0 = (R k + half - j)/(R rate) - t0.
        centre = (filt.oversample * k + filt.half).astype(np.float64)
        a = np.clip(np.ceil(centre - p.end_s * fine_rate), 0, length).astype(np.intp)
        b = np.clip(np.floor(centre - p.t0_s * fine_rate) + 1.0, 0, length).astype(np.intp)
        tau = k / self.rate_hz - p.t0_s
        lam = self._lam
        big_w = math.pi / p.width_s
        # Running sums of h[j] e^{iW lag_j} for this pulse's frequency W.
        run_w = np.zeros(length + 1, dtype=np.complex128)
        np.cumsum(filt.taps * np.exp(1j * big_w * self._lag), out=run_w[1:])
        acting_w = np.exp(1j * big_w * tau) * (run_w[b] - run_w[a])
        force: FloatArray = (-1j * p.peak_n * acting_w).real
        # Modal coefficients of the closed form (response.py): coef I(tau) =
        # k1 e^{iW tau} + k2 e^{-iW tau} - (k1 + k2) e^{lambda tau} while acting,
        # coef I(T) e^{lambda (tau - T)} after; sin(W tau) = Re(-i e^{iW tau}).
        coef = lam * lam / (1j * self._w_d)
        k1 = coef / (2j * (1j * big_w - lam))
        k2 = coef / (2j * (1j * big_w + lam))
        i_end = big_w * (1.0 + np.exp(lam * p.width_s)) / (lam * lam + big_w * big_w)
        pair = self.model.shapes_at(self.sensor_points) * self.model.shape_at(p.point)
        alpha = p.peak_n * (pair @ (-1j + k1 + np.conj(k2)))  # (sensors,)
        beta = -p.peak_n * pair * (k1 + k2)[None, :]  # (sensors, modes)
        delta = p.peak_n * pair * (coef * i_end)[None, :]
        run = self._run_lam
        acting = np.exp(np.outer(lam, tau)) * (run[:, b] - run[:, a])  # (modes, n)
        after = np.exp(np.outer(lam, tau - p.width_s)) * run[:, a]
        accel: FloatArray = (
            alpha[:, None] * acting_w[None, :] + beta @ acting + delta @ after
        ).real
        return force, accel

    def _exact(self, p: Pulse, t: np.ndarray) -> np.ndarray:
        return modal_acceleration(
            self.model, p.point, t, p.t0_s, p.width_s, p.peak_n, sensor_points=self.sensor_points
        )
