"""Exact response of a modal model to a hammer tap, in time and frequency.

The tap is modelled as a half-sine force pulse. `modal_acceleration` gives the
accelerometer signals in closed form (no time stepping, no filtering), so the
simulated test piece can evaluate any chunk of samples at any pulse start time;
`accelerance` gives the matching analytic FRF, optionally as seen through an
exponential window, and `half_sine_spectrum` the pulse's Fourier transform.

Conventions: Fourier transform X(w) = integral x(t) exp(-i w t) dt, the same
sign as numpy's FFT (X(w_k) ~ dt * rfft(x)[k] for a record that starts at the
pulse); w = 2 pi f.

Derivation (per mode r, unit modal mass): q'' + 2 zeta w q' + w^2 q = p(t),
p(t) = phi_r(drive) f(t). With lambda = -zeta w + i w_d, w_d = w sqrt(1 -
zeta^2), A = 1 / (2 i w_d), the displacement impulse response is
g(t) = 2 Re(A exp(lambda t)), so q(t) = 2 Re(A I(t)) with
I(t) = integral_0^min(t,T) exp(lambda (t - tau)) f(tau) dtau. Differentiating
twice (2 Re(A) = 0, 2 Re(A lambda) = 1) gives
q''(t) = f(t) + 2 Re(A lambda^2 I(t))   (per unit modal force),
and the acceleration at point k is sum_r phi_r(k) phi_r(drive) q_r''(t).
For the half-sine f = F0 sin(W tau), W = pi / T, on 0 <= tau <= T:
I(t) = F0/(2i) [(e^{iWt} - e^{lambda t})/(iW - lambda)
                 + (e^{-iWt} - e^{lambda t})/(iW + lambda)],  0 <= t <= T,
I(T) = F0 W (1 + e^{lambda T}) / (lambda^2 + W^2),
I(t) = e^{lambda (t - T)} I(T),  t > T.
All exponents have a non-positive real part, so nothing overflows for any t.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .modal import ModalModel

__all__ = [
    "accelerance",
    "half_sine",
    "half_sine_spectrum",
    "modal_acceleration",
]

FloatArray = NDArray[np.float64]
ComplexArray = NDArray[np.complex128]


def _check_pulse(width_s: float) -> None:
    if not (math.isfinite(width_s) and width_s > 0.0):
        raise ValueError("width_s must be a positive finite duration")


def half_sine(t: ArrayLike, width_s: float, peak_n: float) -> FloatArray:
    """Half-sine force pulse F0 sin(pi t / T) for 0 <= t <= T, else 0.

    Args:
        t: times, s, any shape; the pulse starts at t = 0.
        width_s: pulse duration T, s.
        peak_n: peak force F0, N.

    Returns:
        Force, N, same shape as `t`.
    """
    _check_pulse(width_s)
    ts = np.asarray(t, dtype=np.float64)
    inside = (ts >= 0.0) & (ts <= width_s)
    force: FloatArray = np.where(inside, peak_n * np.sin(np.pi * ts / width_s), 0.0)
    return force


def _sinhc(u: ComplexArray) -> ComplexArray:
    """sinh(u) / u for complex u, 1 at u = 0, accurate near 0."""
    small = np.abs(u) < 1e-6
    safe = np.where(small, 1.0, u)
    out: ComplexArray = np.where(small, 1.0 + u * u / 6.0, np.sinh(safe) / safe)
    return out


def half_sine_spectrum(
    freq_hz: ArrayLike,
    width_s: float,
    peak_n: float,
    extra_decay_per_s: float = 0.0,
) -> ComplexArray:
    """Fourier transform of the half-sine pulse, optionally exponentially weighted.

    F(w) = integral_0^T F0 sin(W t) exp(-s t) dt, s = sigma + i w, W = pi / T,
         = F0 W (1 + exp(-s T)) / (W^2 + s^2),
    with sigma = `extra_decay_per_s` (the weight exp(-sigma t) of an
    exponential window that starts with the pulse; 0 gives the plain
    transform). Evaluated in a form without the removable 0/0 at w = +-W.
    First zero of the plain transform: f = 1.5 / T.

    Args:
        freq_hz: frequencies, Hz, any shape (negative allowed).
        width_s: pulse duration T, s. peak_n: peak force F0, N.
        extra_decay_per_s: sigma, 1/s, >= 0.

    Returns:
        Complex spectrum, N/Hz (N s), same shape as `freq_hz`.
    """
    _check_pulse(width_s)
    if not extra_decay_per_s >= 0.0:
        raise ValueError("extra_decay_per_s must be >= 0")
    w = 2.0 * np.pi * np.asarray(freq_hz, dtype=np.float64)
    z = 0.5 * width_s * (extra_decay_per_s + 1j * w)
    # With z = sT/2: F = F0 (pi T/2) e^{-z} cosh(z) / (pi^2/4 + z^2). Near the
    # pole pair z = +-i pi/2 write cosh(z) = +-i sinh(u), u = z -+ i pi/2, so
    # the ratio is +-i sinhc(u) / (z +- i pi/2), smooth through u = 0.
    sign = np.where(w >= 0.0, 1.0, -1.0)
    u = z - sign * 0.5j * np.pi
    ratio = sign * 1j * _sinhc(u) / (z + sign * 0.5j * np.pi)
    spectrum: ComplexArray = peak_n * (0.5 * np.pi * width_s) * np.exp(-z) * ratio
    return spectrum


def _pair_factors(model: ModalModel, drive_point: str, sensor_points: Sequence[str]) -> FloatArray:
    """phi_r(k) phi_r(drive), shape (n_sensors, n_modes), kg^-1."""
    phi_drive = model.shape_at(drive_point)
    factors: FloatArray = model.shapes_at(sensor_points) * phi_drive
    return factors


def modal_acceleration(
    model: ModalModel,
    drive_point: str,
    t: ArrayLike,
    t0: float,
    width_s: float,
    peak_n: float,
    sensor_points: Sequence[str] | None = None,
) -> FloatArray:
    """Exact acceleration response to one half-sine tap (closed form).

    The pulse F0 sin(pi (t - t0) / T) acts on `drive_point` for
    t0 <= t <= t0 + T; the structure is at rest before t0. Every mode of the
    model contributes, including its direct (feed-through) term, so the result
    is the exact response of the truncated model (see the module docstring).
    Responses to several taps superpose.

    Args:
        model: the structure.
        drive_point: point label the hammer strikes.
        t: sample times, s, any shape (need not be sorted or uniform).
        t0: pulse start, s, any float (may fall between samples).
        width_s: pulse duration T, s. peak_n: peak force F0, N.
        sensor_points: point labels to respond at (roving-sensor mode);
            default the points of `model.sensors` in channel order.

    Returns:
        Acceleration, m/s^2, shape (n_sensors, *t.shape).
    """
    _check_pulse(width_s)
    points = list(model.sensors.values()) if sensor_points is None else list(sensor_points)
    ts = np.asarray(t, dtype=np.float64)
    tau = ts.reshape(-1) - float(t0)
    factors = _pair_factors(model, drive_point, points)  # (n_s, n_m)

    q_dd = _unit_modal_acceleration(model, tau, width_s)  # (n_m, n_t), per unit F0
    out = factors @ q_dd
    out *= peak_n
    return out.reshape((len(points), *ts.shape))


def _unit_modal_acceleration(model: ModalModel, tau: FloatArray, width_s: float) -> FloatArray:
    """Modal accelerations q_r''(tau) for a unit half-sine of `width_s` starting at tau = 0.

    Shape (n_modes, tau.size); zero before the pulse, the closed form while it acts, each
    mode's free decay after it (see the module docstring).
    """
    w = model.omega
    zeta = model.damping_ratio
    w_d = w * np.sqrt(1.0 - zeta**2)
    lam = -zeta * w + 1j * w_d  # (n_m,)
    big_w = math.pi / width_s
    # B = 2 A lambda^2 with A = 1/(2 i w_d); q'' = f + Re(B I) per unit force.
    coef = (lam * lam / (1j * w_d))[:, None]
    during = np.flatnonzero((tau >= 0.0) & (tau <= width_s))
    after = np.flatnonzero(tau > width_s)
    q_dd: FloatArray = np.zeros((lam.size, tau.size), dtype=np.float64)
    if during.size:
        td = tau[during]
        e_lam = np.exp(np.outer(lam, td))  # (n_m, n_d)
        e_pos = np.exp(1j * big_w * td)
        e_neg = np.conj(e_pos)
        lam_c = lam[:, None]
        integral = (0.5 / 1j) * (
            (e_pos - e_lam) / (1j * big_w - lam_c) + (e_neg - e_lam) / (1j * big_w + lam_c)
        )
        q_dd[:, during] = np.sin(big_w * td) + (coef * integral).real
    if after.size:
        i_end = big_w * (1.0 + np.exp(lam * width_s)) / (lam * lam + big_w * big_w)
        decay = np.exp(np.outer(lam, tau[after] - width_s))  # (n_m, n_a)
        q_dd[:, after] = ((coef[:, 0] * i_end)[:, None] * decay).real
    return q_dd


def accelerance(
    model: ModalModel,
    drive_point: str,
    response_point: str,
    freq_hz: ArrayLike,
    extra_decay_per_s: float = 0.0,
) -> ComplexArray:
    """Analytic accelerance FRF of the model, (m/s^2)/N.

    H(w) = sum_r phi_r(k) phi_r(j) s^2 / (s^2 + 2 zeta_r w_r s + w_r^2),
    s = sigma + i w, with k = `response_point`, j = `drive_point` and
    sigma = `extra_decay_per_s`. With sigma = 0 this is the usual
    sum_r phi_r(k) phi_r(j) (-w^2) / (w_r^2 - w^2 + 2 i zeta_r w_r w), the
    Fourier transform (exp(-i w t) convention) of the acceleration impulse
    response h(t) that `modal_acceleration` convolves with. With sigma > 0 it
    is the exact transform of h(t) exp(-sigma t), i.e. H(w - i sigma): every
    pole lambda_r moves to lambda_r - sigma (modal decay rate zeta_r w_r
    raised by sigma) and the numerator s^2 keeps the direct term (h contains
    sum_r phi_r(k) phi_r(j) delta(t), untouched by the weight). It equals the
    ratio of the transforms of exponentially windowed response and force when
    the same window exp(-sigma (t - t0)) is applied to both channels.

    Args:
        model: the structure. drive_point, response_point: point labels.
        freq_hz: frequencies, Hz, any shape.
        extra_decay_per_s: sigma = 1 / tau of the exponential window, 1/s, >= 0.

    Returns:
        Complex accelerance, (m/s^2)/N, same shape as `freq_hz`.
    """
    if not extra_decay_per_s >= 0.0:
        raise ValueError("extra_decay_per_s must be >= 0")
    factors = _pair_factors(model, drive_point, [response_point])[0]  # (n_m,)
    f = np.asarray(freq_hz, dtype=np.float64)
    s = (extra_decay_per_s + 2j * np.pi * f.reshape(-1))[:, None]
    w = model.omega
    zeta = model.damping_ratio
    terms = s * s / (s * s + 2.0 * zeta * w * s + w * w)  # (n_f, n_m)
    h: ComplexArray = (terms @ factors.astype(np.complex128)).reshape(f.shape)
    return h
