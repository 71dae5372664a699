"""Per-hit spectra and their running averages: windows, auto/cross spectra, H1, H2, coherence.

The DSP stage between the hit checks and the session. Pure numpy, no state beyond the
running sums of one `SpectralAverager`: no threads, no I/O.

Per accepted hit (`hit_spectra`):

* the force channel is multiplied by a force window (1 from the record start through the
  end of the pulse plus a margin, then a short half-Hann taper to 0), which removes the
  noise the hammer channel records after the tap;
* force and responses are both multiplied by the same exponential window
  exp(-(t - t_trig)/tau) from the trigger sample on, so a response that has not died
  away by the end of the block does not leak;
* one real FFT of the stacked windowed channels gives F (force) and X (responses).

`SpectralAverager` accumulates conj(F)·F, conj(X)·X and conj(F)·X over hits and scales
them to one-sided spectral densities, exactly as scipy.signal.welch/csd do with a boxcar
window of one block, no overlap and no detrending (``scaling="density"``):
G = 2·conj(A)·B/(fs·block) with the DC line (and the Nyquist line of an even block) not
doubled. From those: H1 = Gfx/Gff, H2 = Gxx/Gxf, coherence γ² = |Gfx|²/(Gff·Gxx).

Exponential window and damping: multiplying every channel by exp(-t/tau) turns the
impulse response h(t) into h(t)·exp(-t/tau), i.e. the FRF into H(ω - i/tau): every mode's
decay rate ζ_r·ω_r is raised by 1/tau. Damping identified from windowed FRFs must be
corrected, ζ_true = ζ_measured - 1/(ω_r·tau) (see `corrected_damping_ratio`).

Units: force N, responses m/s², time s, frequency Hz. Spectra F, X are plain DFT sums
(N and m/s² per line, no dt factor); Gff is N²/Hz, Gxx (m/s²)²/Hz, Gfx N·(m/s²)/Hz, so
H1 and H2 are accelerance, (m/s²)/N.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TypeVar

import numpy as np
from numpy.typing import NDArray

__all__ = [
    "NO_EXP_TAU_S",
    "HitSpectra",
    "SpectralAverager",
    "WindowSettings",
    "corrected_damping_ratio",
    "exp_decay_per_s",
    "exp_window_tau",
    "exponential_window",
    "force_window",
    "hit_spectra",
    "single_average_warning",
]

FloatArray = NDArray[np.float64]
ComplexArray = NDArray[np.complex128]
_T = TypeVar("_T", bound=np.generic)

#: Time constant reported when no exponential window is applied, s.
NO_EXP_TAU_S = math.inf


@dataclass(frozen=True, slots=True)
class WindowSettings:
    """How each hit is windowed before its FFT.

    force_margin_s: the force window stays at 1 this long after the pulse end, s.
    force_taper_s: then falls to 0 over this long with a half-Hann (cosine) taper, s.
    exp_end_value: value of the exponential window at the last sample of the block
        (e.g. 0.01); None applies no exponential window.
    """

    force_margin_s: float = 0.002
    force_taper_s: float = 0.001
    exp_end_value: float | None = None

    def __post_init__(self) -> None:
        if not (math.isfinite(self.force_margin_s) and self.force_margin_s >= 0.0):
            raise ValueError("force_margin_s must be a finite duration >= 0")
        if not (math.isfinite(self.force_taper_s) and self.force_taper_s >= 0.0):
            raise ValueError("force_taper_s must be a finite duration >= 0")
        if self.exp_end_value is not None and not 0.0 < self.exp_end_value < 1.0:
            raise ValueError("exp_end_value must lie strictly between 0 and 1, or be None")


def force_window(
    block: int, pulse_end: int, rate_hz: float, margin_s: float, taper_s: float
) -> FloatArray:
    """Force window: 1 through the pulse plus a margin, a half-Hann taper, then 0.

    With m = round(margin_s·rate) and n = round(taper_s·rate): w[k] = 1 for
    k < pulse_end + m, w[pulse_end + m + j] = (1 + cos(π (j+1)/(n+1)))/2 for
    j = 0..n-1 (strictly between 0 and 1, so the taper never cuts to 0 in one step),
    and w[k] = 0 from pulse_end + m + n on. Parts beyond the block are dropped.

    Args:
        block: record length, samples.
        pulse_end: index into the record one past the last sample of the force pulse
            (0..block).
        rate_hz: sample rate, Hz.
        margin_s: unity margin after the pulse, s, >= 0.
        taper_s: taper length, s, >= 0.

    Returns:
        Window, shape (block,), float64.
    """
    _check_block(block)
    if not 0 <= pulse_end <= block:
        raise ValueError(f"pulse_end {pulse_end} outside the record 0..{block}")
    if not (rate_hz > 0.0 and math.isfinite(rate_hz)):
        raise ValueError("rate_hz must be positive")
    if not (margin_s >= 0.0 and taper_s >= 0.0 and math.isfinite(margin_s + taper_s)):
        raise ValueError("margin_s and taper_s must be finite and >= 0")
    flat_end = pulse_end + round(margin_s * rate_hz)
    n_taper = round(taper_s * rate_hz)
    w = np.zeros(block, dtype=np.float64)
    w[: min(flat_end, block)] = 1.0
    if n_taper and flat_end < block:
        j = np.arange(min(n_taper, block - flat_end), dtype=np.float64)
        w[flat_end : flat_end + j.size] = 0.5 * (1.0 + np.cos(np.pi * (j + 1.0) / (n_taper + 1)))
    return w


def exp_window_tau(block: int, start: int, rate_hz: float, end_value: float | None) -> float:
    """Time constant tau (s) of the exponential window; `NO_EXP_TAU_S` (inf) for None.

    tau = (block - 1 - start) / (rate · ln(1/end_value)), so that the window
    exp(-(k - start)/(rate·tau)) equals end_value at the last sample k = block - 1.
    """
    _check_block(block)
    if end_value is None:
        return NO_EXP_TAU_S
    _check_exp(block, start, end_value)
    return (block - 1 - start) / (rate_hz * math.log(1.0 / end_value))


def exponential_window(
    block: int, start: int, rate_hz: float, end_value: float | None
) -> tuple[FloatArray, float]:
    """Exponential window from the trigger sample on, and its time constant.

    w[k] = 1 for k < start (the pre-trigger: the structure is at rest there, only the
    leading edge of the pulse below the trigger level is recorded, and it is left
    unweighted rather than amplified); w[k] = exp(-(k - start)/(rate·tau)) for k >= start,
    computed as end_value ** ((k - start)/(block - 1 - start)) so that w[start] = 1 and
    w[block - 1] = end_value exactly. tau from `exp_window_tau`. Applied to force and
    responses alike, the windowed record from the trigger on is the record of the same
    structure with every modal decay rate raised by 1/tau (times the constant
    exp(-(t_trig - t)/tau) for a time origin t other than the trigger, common to all
    channels, so it cancels in H1 and H2).

    Args:
        block: record length, samples.
        start: trigger sample index in the record (the pre-trigger length), 0..block-2.
        rate_hz: sample rate, Hz.
        end_value: window value at the last sample, 0 < end_value < 1; None for no
            exponential window (all ones, tau = inf).

    Returns:
        (w, tau_s): w shape (block,) float64, tau_s in s.
    """
    tau_s = exp_window_tau(block, start, rate_hz, end_value)
    w = np.ones(block, dtype=np.float64)
    if end_value is not None:
        k = np.arange(block - start, dtype=np.float64)
        w[start:] = np.power(end_value, k / (block - 1 - start))
    return w, tau_s


def exp_decay_per_s(tau_s: float) -> float:
    """Extra modal decay rate 1/tau (1/s) an exponential window adds; 0 for tau = inf."""
    if not tau_s > 0.0:
        raise ValueError("tau_s must be positive")
    return 0.0 if math.isinf(tau_s) else 1.0 / tau_s


def corrected_damping_ratio(zeta_measured: float, freq_hz: float, tau_s: float) -> float:
    """Damping ratio of a mode with the exponential window's share removed.

    ζ_true = ζ_measured - 1/(ω·tau), ω = 2π·freq_hz (the window raises the decay rate
    ζ·ω by 1/tau). tau = inf returns zeta_measured.
    """
    if not freq_hz > 0.0:
        raise ValueError("freq_hz must be positive")
    return zeta_measured - exp_decay_per_s(tau_s) / (2.0 * math.pi * freq_hz)


@dataclass(frozen=True, slots=True, eq=False)
class HitSpectra:
    """Spectra of one windowed hit.

    F: force spectrum, shape (n_freq,) complex, the rfft of the windowed force (N).
    X: response spectra, shape (n_resp, n_freq) complex, rfft of the windowed responses
        (m/s²), in the order of `response_channels`.
    tau_s: exponential window time constant, s (inf when none).
    force_window: the force window, shape (block,); the force was multiplied by
        force_window·exp_window.
    exp_window: the exponential window, shape (block,), applied to every channel.
    rate_hz: sample rate, Hz.
    n_freq = block//2 + 1 lines at `freq_hz`.
    """

    F: ComplexArray
    X: ComplexArray
    tau_s: float
    force_window: FloatArray
    exp_window: FloatArray
    rate_hz: float

    @property
    def block(self) -> int:
        return int(self.exp_window.size)

    @property
    def n_freq(self) -> int:
        return int(self.F.size)

    @property
    def freq_hz(self) -> FloatArray:
        """Line frequencies, shape (n_freq,), Hz: rfftfreq(block, 1/rate)."""
        f = np.fft.rfftfreq(self.block, 1.0 / self.rate_hz).astype(np.float64)
        return f


def hit_spectra(
    record: NDArray[np.floating],
    force_channel: int,
    response_channels: Sequence[int],
    pretrigger: int,
    pulse_end: int,
    rate_hz: float,
    windows: WindowSettings,
) -> HitSpectra:
    """Window one hit and take the spectra of its force and response channels.

    The force gets force_window × exponential window, each response the exponential
    window only (it starts at the trigger sample `pretrigger`); then one rfft of the
    stacked (1 + n_resp, block) array along the last axis.

    Args:
        record: (channels, block) samples in SI units (N, m/s²), float32 or float64.
        force_channel: row of the force signal.
        response_channels: rows of the responses, at least one.
        pretrigger: index of the trigger sample in the record.
        pulse_end: index one past the end of the force pulse.
        rate_hz: sample rate, Hz.
        windows: window settings.

    Returns:
        The hit's `HitSpectra` (n_freq = block//2 + 1).
    """
    data = np.asarray(record)
    if data.ndim != 2:
        raise ValueError(f"record must be (channels, block), got shape {data.shape}")
    channels, block = data.shape
    rows = [int(force_channel), *(int(c) for c in response_channels)]
    if len(rows) < 2:
        raise ValueError("at least one response channel is needed")
    if any(not 0 <= r < channels for r in rows):
        raise ValueError(f"channel index outside 0..{channels - 1}: {rows}")
    fw = force_window(block, pulse_end, rate_hz, windows.force_margin_s, windows.force_taper_s)
    ew, tau_s = exponential_window(block, pretrigger, rate_hz, windows.exp_end_value)
    # Fancy indexing copies, so the windows can be applied in place.
    stacked = data[rows].astype(np.float64, copy=False)
    stacked *= ew
    stacked[0] *= fw
    spectra = np.fft.rfft(stacked, axis=-1)
    return HitSpectra(
        F=spectra[0],
        X=spectra[1:],
        tau_s=tau_s,
        force_window=fw,
        exp_window=ew,
        rate_hz=float(rate_hz),
    )


class SpectralAverager:
    """Running averages of one point's auto and cross spectra over accepted hits.

    Every hit counts once (linear averaging). Until the first hit the densities are NaN.
    Densities use scipy.signal.csd/welch's one-sided density scaling for a boxcar window of
    one block: G_ab = 2·conj(A)·B/(fs·block), the DC line and (even block) the Nyquist line
    not doubled. Cross spectra are conj(F)·X (force first, as csd(x=force, y=response)).
    """

    def __init__(self, n_resp: int, block: int, rate_hz: float) -> None:
        _check_block(block)
        if n_resp < 1:
            raise ValueError("n_resp must be >= 1")
        if not (rate_hz > 0.0 and math.isfinite(rate_hz)):
            raise ValueError("rate_hz must be positive")
        self.n_resp = int(n_resp)
        self.block = int(block)
        self.rate_hz = float(rate_hz)
        n_freq = block // 2 + 1
        self._freq = np.fft.rfftfreq(block, 1.0 / rate_hz).astype(np.float64)
        self._freq.flags.writeable = False
        scale = np.full(n_freq, 2.0 / (rate_hz * block))
        scale[0] *= 0.5
        if block % 2 == 0:
            scale[-1] *= 0.5
        self._scale = scale
        self._sff = np.zeros(n_freq, dtype=np.float64)
        self._sxx = np.zeros((n_resp, n_freq), dtype=np.float64)
        self._sfx = np.zeros((n_resp, n_freq), dtype=np.complex128)
        self._count = 0

    def add(self, spectra: HitSpectra) -> None:
        """Add one hit's spectra to the sums."""
        if spectra.block != self.block or spectra.X.shape != self._sxx.shape:
            raise ValueError(
                f"hit spectra of block {spectra.block} with {spectra.X.shape[0]} responses; "
                f"this average takes block {self.block} with {self.n_resp}"
            )
        if spectra.rate_hz != self.rate_hz:
            raise ValueError(f"hit at {spectra.rate_hz} Hz; this average is at {self.rate_hz}")
        f = spectra.F
        x = spectra.X
        self._sff += f.real * f.real + f.imag * f.imag
        self._sxx += x.real * x.real + x.imag * x.imag
        self._sfx += np.conj(f) * x
        self._count += 1

    @property
    def count(self) -> int:
        """Number of hits averaged."""
        return self._count

    @property
    def freq_hz(self) -> FloatArray:
        """Line frequencies, shape (n_freq,), Hz (read-only)."""
        return self._freq

    def _norm(self) -> FloatArray:
        if self._count == 0:
            return np.full_like(self._scale, np.nan)
        out: FloatArray = self._scale / self._count
        return out

    @property
    def gff(self) -> FloatArray:
        """Force auto spectral density, shape (n_freq,), N²/Hz."""
        out: FloatArray = self._sff * self._norm()
        return out

    @property
    def gxx(self) -> FloatArray:
        """Response auto spectral densities, shape (n_resp, n_freq), (m/s²)²/Hz."""
        out: FloatArray = self._sxx * self._norm()
        return out

    @property
    def gfx(self) -> ComplexArray:
        """Cross spectral densities conj(F)·X, shape (n_resp, n_freq), N·(m/s²)/Hz."""
        out: ComplexArray = self._sfx * self._norm()
        return out

    def h1(self) -> ComplexArray:
        """H1 = Gfx/Gff, shape (n_resp, n_freq), (m/s²)/N; NaN where Gff = 0."""
        return _divide(self.gfx, np.broadcast_to(self.gff, self._sfx.shape))

    def h2(self) -> ComplexArray:
        """H2 = Gxx/Gxf, Gxf = conj(Gfx), shape (n_resp, n_freq), (m/s²)/N; NaN where Gxf = 0."""
        return _divide(self.gxx.astype(np.complex128), np.conj(self.gfx))

    def coherence(self) -> FloatArray:
        """γ² = |Gfx|²/(Gff·Gxx), shape (n_resp, n_freq); NaN where Gff·Gxx = 0."""
        g = self.gfx
        num = g.real * g.real + g.imag * g.imag
        out: FloatArray = _divide(num, self.gff * self.gxx)
        return out


def single_average_warning(count: int) -> str | None:
    """A sentence for the operator when the coherence rests on one average, else None.

    With one average |Gfx|² = Gff·Gxx at every line, so γ² = 1 whatever the noise
    (Bendat & Piersol, Random Data, 2010).
    """
    if count < 0:
        raise ValueError("count must be >= 0")
    if count == 1:
        return (
            "Only one hit averaged: the coherence of a single average is 1 at every "
            "frequency whatever the noise or nonlinearity, so it proves nothing; "
            "average several hits to judge the measurement."
        )
    return None


def _divide(num: NDArray[_T], den: NDArray[np.generic]) -> NDArray[_T]:
    """num/den, NaN where den is 0 or either is not finite, without floating-point warnings."""
    out = np.full(np.broadcast_shapes(num.shape, den.shape), np.nan, dtype=num.dtype)
    # NaN operands are masked out too: complex division by NaN raises "invalid value".
    np.divide(num, den, out=out, where=(den != 0) & np.isfinite(den) & np.isfinite(num))
    return out


def _check_block(block: int) -> None:
    if block < 2:
        raise ValueError("block must be at least 2 samples")


def _check_exp(block: int, start: int, end_value: float) -> None:
    if not 0.0 < end_value < 1.0:
        raise ValueError("exp end value must lie strictly between 0 and 1")
    if not 0 <= start <= block - 2:
        raise ValueError(f"exponential window start {start} outside 0..{block - 2}")
