"""The converter's anti-alias (decimation) filter: a Kaiser-window linear-phase FIR.

`AntiAliasFilter` designs the taps and evaluates its transfer function;
`converter_filter` is the one the simulated test piece uses. How the
synthesiser applies it is in synth.py's docstring.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import cache

import numpy as np
from numpy.polynomial.chebyshev import chebval
from numpy.typing import ArrayLike, NDArray

FloatArray = NDArray[np.float64]
ComplexArray = NDArray[np.complex128]


def kaiser_beta(attenuation_db: float) -> float:
    """Kaiser window shape parameter beta for a stopband attenuation A in dB.

    beta = 0.1102 (A - 8.7) for A > 50; 0.5842 (A - 21)^0.4 + 0.07886 (A - 21)
    for 21 <= A <= 50; 0 below (Kaiser's empirical design formula, as given in
    Oppenheim & Schafer, Discrete-Time Signal Processing, 3rd ed., 2010, §7.6).
    """
    a = attenuation_db
    if a > 50.0:
        return 0.1102 * (a - 8.7)
    if a >= 21.0:
        return 0.5842 * math.pow(a - 21.0, 0.4) + 0.07886 * (a - 21.0)
    return 0.0


@dataclass(frozen=True, eq=False)
class AntiAliasFilter:
    """A converter's decimation filter: windowed-sinc linear-phase FIR at R times the rate.

    Designed with Kaiser's window method: ideal low-pass with its cutoff in the
    middle of the transition band, times a Kaiser window (numpy.kaiser) of
    shape beta = `kaiser_beta(attenuation_db)` and length L = M + 1, M the even
    order not below (A - 7.95) / (14.36 Δf), Δf the transition width in cycles
    per fine sample; taps scaled to a DC gain of exactly 1. The window method
    gives the same ripple δ = 10^(-A/20) in both bands, so the passband is flat
    to 20·log10(1 + δ) dB (±0.0001 dB for 100 dB).

    Frequencies are fractions of the output rate, so one filter serves every rate.
    The defaults: R = 64 (a sigma-delta modulator commonly runs at 64 times the
    output rate; common practice, from memory), passband to 0.4·rate, stopband
    from 0.5·rate, A = 100 dB. They give L = 4105 taps, a group delay of 2052
    fine samples (32.06 output samples), a passband flat within ±0.0001 dB to
    0.4·rate, -6.02 dB at 0.45·rate and at least 99.9 dB of attenuation from
    0.5·rate up to 32·rate, the Nyquist frequency of the fine grid.

    The continuous signals are point-sampled on the fine grid, so what lies
    above 32·rate still folds back. For a half-sine tap of width T that is the
    spectrum's 1/(2 f T)² tail at f ≈ 64·rate: for the hardest tip the simulated
    instrument allows (0.2 ms) at 51.2 kHz about 125 dB below the pulse's
    low-frequency level, well under the stopband.

    oversample: R, fine samples per output sample. passband, stopband: band
    edges, fractions of the output rate, 0 < passband < stopband <= 0.5 · R.
    attenuation_db: A, > 21.
    """

    oversample: int = 64
    passband: float = 0.4
    stopband: float = 0.5
    attenuation_db: float = 100.0
    taps: FloatArray = field(init=False, repr=False)

    def __post_init__(self) -> None:
        r = self.oversample
        if not (isinstance(r, int) and r >= 1):
            raise ValueError("oversample must be an integer >= 1")
        if not 0.0 < self.passband < self.stopband <= 0.5 * r:
            raise ValueError("band edges must satisfy 0 < passband < stopband <= oversample / 2")
        if not self.attenuation_db > 21.0:
            raise ValueError("attenuation_db must exceed 21 dB")
        width = (self.stopband - self.passband) / r  # cycles per fine sample
        order = math.ceil((self.attenuation_db - 7.95) / (14.36 * width))
        order += order % 2  # even order: odd length, a whole number of fine samples of delay
        cutoff = 0.5 * (self.passband + self.stopband) / r
        n = np.arange(order + 1) - 0.5 * order
        taps = 2.0 * cutoff * np.sinc(2.0 * cutoff * n)
        taps *= np.kaiser(order + 1, kaiser_beta(self.attenuation_db))
        taps /= taps.sum()
        taps.flags.writeable = False
        object.__setattr__(self, "taps", taps)

    @property
    def length(self) -> int:
        """L, number of taps (odd)."""
        return int(self.taps.size)

    @property
    def half(self) -> int:
        """Group delay (L - 1) / 2, fine samples: the filter reaches this far each way."""
        return (self.length - 1) // 2

    def reach_s(self, rate_hz: float) -> float:
        """How far a pulse's influence reaches before its start and after its end, s."""
        return self.half / (self.oversample * rate_hz)

    def transfer(self, s: ArrayLike, rate_hz: float) -> ComplexArray:
        """G(s) = sum_j h[j] exp(s lag_j), lag_j = (half - j)/(R rate): the compensated response.

        At s = 2πi f this is the filter's frequency response (real: the taps are
        symmetric, so the compensated filter has zero phase); at s = lambda, a
        mode's pole, it is what the filter does to the free decay exp(lambda t).
        Pairing the symmetric taps, G(s) = h[half] + sum_n 2 h[half + n] cosh(n s dt)
        = sum_n c_n T_n(cosh(s dt)), dt = 1/(R rate), a Chebyshev series
        (T_n(cosh x) = cosh(n x)) evaluated by Clenshaw's recurrence
        (numpy.polynomial.chebyshev.chebval): O(L) array operations for any number of s.

        Args:
            s: complex frequencies, 1/s, any shape.
            rate_hz: output sample rate, Hz.

        Returns:
            Complex gain, same shape as `s`.
        """
        ss = np.asarray(s, dtype=np.complex128)
        dt = 1.0 / (self.oversample * rate_hz)
        gain = np.asarray(chebval(np.cosh(ss * dt), self._chebyshev), dtype=np.complex128)
        return gain

    def frequency_response(self, freq_hz: ArrayLike, rate_hz: float) -> FloatArray:
        """Gain of the delay-compensated filter at `freq_hz` (Hz, any shape), real.

        G(f) = sum_n c_n T_n(cos(2π f dt)), the real case of `transfer`.
        """
        f = np.asarray(freq_hz, dtype=np.float64)
        dt = 1.0 / (self.oversample * rate_hz)
        gain = np.asarray(chebval(np.cos(2.0 * np.pi * f * dt), self._chebyshev), dtype=np.float64)
        return gain

    @property
    def _chebyshev(self) -> FloatArray:
        """c_0 = h[half], c_n = 2 h[half + n]: G as a Chebyshev series (see `transfer`)."""
        c: FloatArray = 2.0 * self.taps[self.half :]
        c[0] = self.taps[self.half]
        return c


@cache
def converter_filter() -> AntiAliasFilter:
    """The simulated test piece's anti-alias filter (the `AntiAliasFilter` defaults)."""
    return AntiAliasFilter()
