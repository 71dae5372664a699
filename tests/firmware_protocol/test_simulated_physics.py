"""Physics checks of the simulated test piece: plate model, tap pulse, responses, FRFs.

Every number is compared against something outside the project: closed-form
textbook results re-derived in the test, SciPy integrators and quadrature,
or numpy's FFT. Section numbers of cited books are given from memory.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from numpy.typing import NDArray
from scipy import signal
from scipy.integrate import cubature, solve_ivp
from scipy.optimize import brentq

from taprig.firmware_protocol.simpiece import (
    DEMO_DRIVING_POINT,
    ModalModel,
    accelerance,
    demo_panel,
    half_sine,
    half_sine_spectrum,
    load_truth,
    modal_acceleration,
    simply_supported_plate,
    truth_dict,
    write_truth,
)
from taprig.firmware_protocol.simpiece.modal import plate_modes, plate_shapes
from taprig.firmware_protocol.simpiece.synth import (
    AntiAliasFilter,
    Pulse,
    ResponseSynth,
    converter_filter,
    kaiser_beta,
)

FloatArray = NDArray[np.float64]

# A steel test plate, independent of the demo panel (handbook values from memory).
STEEL = {"a": 0.5, "b": 0.3, "h": 0.002, "youngs_pa": 200e9, "poisson": 0.3, "density": 7850.0}


def _leissa_freqs(
    a: float, b: float, h: float, e: float, nu: float, rho: float, f_max: float
) -> tuple[FloatArray, list[tuple[int, int]]]:
    """omega_mn = pi^2 (m^2/a^2 + n^2/b^2) sqrt(D/(rho h)), written out independently."""
    d = e * h**3 / (12.0 * (1.0 - nu**2))
    found = []
    for m in range(1, 200):
        for n in range(1, 200):
            omega = math.pi**2 * (m**2 / a**2 + n**2 / b**2) * math.sqrt(d / (rho * h))
            if omega / (2.0 * math.pi) <= f_max:
                found.append((omega / (2.0 * math.pi), m, n))
    found.sort()
    return np.array([f for f, _, _ in found]), [(m, n) for _, m, n in found]


def _three_mode_model() -> ModalModel:
    """A small hand-made model: 3 modes, 4 points, 2 sensors."""
    shapes = np.array([[0.8, -0.5, 0.3], [0.4, 0.9, -0.7], [-0.6, 0.2, 1.1], [0.5, 0.5, 0.5]])
    return ModalModel(
        labels=("p1", "p2", "p3", "p4"),
        coords=np.zeros((4, 3)),
        freqs_hz=np.array([300.0, 1100.0, 2600.0]),
        damping_ratio=np.array([0.02, 0.015, 0.01]),
        shapes=shapes,
        sensors={"ch0": "p2", "ch1": "p4"},
        grid=("p1", "p2", "p3"),
    )


def test_plate_frequencies_match_leissa() -> None:
    """Natural frequencies of the simply supported plate.

    Source: A. W. Leissa, Vibration of Plates, NASA SP-160, 1969, ch. 4
    (rectangular plates, all edges simply supported): omega_mn =
    pi^2 (m^2/a^2 + n^2/b^2) sqrt(D/(rho h)), D = E h^3 / (12 (1 - nu^2)).
    The formula is evaluated here independently of the project code.
    Demo panel f11 by hand: D = 69e9 * 0.003^3 / (12 * (1 - 0.33^2)) =
    174.22 N m, rho h = 8.1 kg/m^2, sqrt(D/(rho h)) = 4.6378 m^2/s,
    f11 = (pi/2) (1/0.36 + 1/0.16) * 4.6378 = 65.77 Hz.
    """
    f_max = 3000.0
    model = simply_supported_plate(
        **STEEL, damping_ratio=0.01, f_max_hz=f_max, points={"c": (0.2, 0.1)}
    )
    expected, _ = _leissa_freqs(
        STEEL["a"],
        STEEL["b"],
        STEEL["h"],
        STEEL["youngs_pa"],
        STEEL["poisson"],
        STEEL["density"],
        f_max,
    )
    assert model.n_modes == expected.size
    np.testing.assert_allclose(model.freqs_hz, expected, rtol=1e-12)

    panel = demo_panel()
    assert panel.freqs_hz[0] == pytest.approx(65.77, abs=0.01)
    assert np.all(np.diff(panel.freqs_hz) >= 0.0)
    assert panel.freqs_hz[-1] <= 5000.0


def test_mode_shapes_are_mass_normalised() -> None:
    """Orthonormality of the plate modes: integral of rho h phi_r phi_s dA = delta_rs.

    Sources: Leissa, Vibration of Plates, NASA SP-160, 1969, ch. 4 (mode
    shapes sin(m pi x/a) sin(n pi y/b)); the normalisation integral is done
    by adaptive cubature (scipy.integrate.cubature, Gauss-Kronrod 21).
    The model's stored shapes are checked against the same closed form
    2/sqrt(rho h a b) sin sin written out here.
    """
    a, b, h, rho = STEEL["a"], STEEL["b"], STEEL["h"], STEEL["density"]
    orders, _ = plate_modes(a, b, h, STEEL["youngs_pa"], STEEL["poisson"], rho, 1500.0)
    orders = orders[:8]

    def integrand(xy: FloatArray) -> FloatArray:
        phi = plate_shapes(a, b, h, rho, orders, xy[:, 0], xy[:, 1])  # (n_pts, 8)
        gram: FloatArray = rho * h * phi[:, :, None] * phi[:, None, :]
        return gram

    res = cubature(integrand, [0.0, 0.0], [a, b], rtol=1e-11, atol=1e-13)
    assert res.status == "converged"
    np.testing.assert_allclose(res.estimate, np.eye(len(orders)), atol=1e-12)

    points = {"u": (0.11, 0.07), "v": (0.37, 0.23), "w": (0.25, 0.15)}
    model = simply_supported_plate(**STEEL, damping_ratio=0.01, f_max_hz=1500.0, points=points)
    _, order_list = _leissa_freqs(a, b, h, STEEL["youngs_pa"], STEEL["poisson"], rho, 1500.0)
    for label, (x, y) in points.items():
        ref = [
            2.0
            / math.sqrt(rho * h * a * b)
            * math.sin(m * math.pi * x / a)
            * math.sin(n * math.pi * y / b)
            for m, n in order_list
        ]
        np.testing.assert_allclose(model.shape_at(label), ref, rtol=1e-12, atol=1e-14)


def test_half_sine_spectrum_first_zero() -> None:
    """Fourier transform of the half-sine pulse: first zero at f = 1.5 / T.

    Sources: standard transform pair of the half-sine pulse,
    F(w) = F0 (pi/T) (1 + exp(-i w T)) / ((pi/T)^2 - w^2), obtained from
    the rectangle pair with the modulation and shift theorems
    (R. N. Bracewell, The Fourier Transform and Its Applications, 3rd ed.,
    2000, ch. 6); DC value 2 F0 T / pi and value -i F0 T / 2 at f = 1/(2T)
    by elementary integration; numerical check with numpy.fft.rfft of a
    finely sampled pulse (rectangle rule), also with an exponential weight
    exp(-sigma t) (Laplace shift theorem, A. V. Oppenheim & A. S. Willsky,
    Signals and Systems, 2nd ed., 1997, sec. 9.5).
    """
    width, peak = 0.8e-3, 120.0
    assert abs(half_sine_spectrum(0.0, width, peak)) == pytest.approx(
        2.0 * peak * width / math.pi, rel=1e-14
    )
    assert complex(half_sine_spectrum(0.5 / width, width, peak)) == pytest.approx(
        -0.5j * peak * width, rel=1e-12
    )

    # The spectrum is exp(-i w T/2) times a real amplitude; its root is the zero.
    def amplitude(f: float) -> float:
        return float((half_sine_spectrum(f, width, peak) * np.exp(1j * np.pi * f * width)).real)

    root = brentq(amplitude, 1.2 / width, 1.8 / width, xtol=1e-12)
    assert root == pytest.approx(1.5 / width, rel=1e-9)
    below = np.abs(half_sine_spectrum(np.linspace(0.0, 1.45 / width, 2000), width, peak))
    assert below.min() > 0.01 * peak * width

    dt = width / 1000.0
    n = 200_000  # 200 pulse widths: 0.005/T resolution
    t = np.arange(n) * dt
    freqs = np.fft.rfftfreq(n, dt)
    band = freqs < 5.0 / width
    for sigma in (0.0, 400.0):
        sampled = half_sine(t, width, peak) * np.exp(-sigma * t)
        numeric = dt * np.fft.rfft(sampled)[band]
        analytic = half_sine_spectrum(freqs[band], width, peak, extra_decay_per_s=sigma)
        np.testing.assert_allclose(numeric, analytic, rtol=0, atol=2e-6 * peak * width)
    plain = np.abs(dt * np.fft.rfft(half_sine(t, width, peak)))
    inner = np.flatnonzero((plain[1:-1] < plain[:-2]) & (plain[1:-1] < plain[2:])) + 1
    assert freqs[inner[0]] == pytest.approx(1.5 / width, abs=freqs[1])


def test_single_mode_matches_damped_free_vibration() -> None:
    """One mode: closed-form acceleration vs the SDOF solution.

    Sources: during the pulse, scipy.integrate.solve_ivp (DOP853, rtol 1e-10)
    of x'' + 2 zeta w x' + w^2 x = phi F(t); after it, the underdamped free
    vibration x(s) = exp(-zeta w s) [x_T cos(w_d s) + (v_T + zeta w x_T)/w_d
    sin(w_d s)] (S. S. Rao, Mechanical Vibrations, 5th ed., 2011, sec. 2.6),
    acceleration from the free equation of motion a = -2 zeta w v - w^2 x.
    Error below 1e-9 of the peak acceleration.
    """
    f_n, zeta, phi = 180.0, 0.03, 0.7
    model = ModalModel(
        labels=("p",),
        coords=np.zeros((1, 3)),
        freqs_hz=np.array([f_n]),
        damping_ratio=np.array([zeta]),
        shapes=np.array([[phi]]),
        sensors={"acc": "p"},
        grid=("p",),
    )
    width, peak, t0 = 1.2e-3, 50.0, 0.01234567
    w = 2.0 * math.pi * f_n
    w_d = w * math.sqrt(1.0 - zeta**2)
    fs = 51_200.0
    t = np.arange(int(0.2 * fs)) / fs
    acc = modal_acceleration(model, "p", t, t0, width, peak)[0]

    def rhs(tau: float, y: FloatArray) -> list[float]:
        force = peak * math.sin(math.pi * tau / width)
        return [y[1], phi * force - 2.0 * zeta * w * y[1] - w**2 * y[0]]

    sol = solve_ivp(
        rhs, (0.0, width), [0.0, 0.0], method="DOP853", rtol=1e-10, atol=1e-16, dense_output=True
    )
    assert sol.success
    x_t, v_t = sol.y[:, -1]
    tau = t - t0
    ref = np.zeros_like(t)
    inside = (tau >= 0.0) & (tau <= width)
    x_in, v_in = sol.sol(tau[inside])
    ref[inside] = phi * (
        phi * peak * np.sin(np.pi * tau[inside] / width) - 2.0 * zeta * w * v_in - w**2 * x_in
    )
    s = tau[tau > width] - width
    sig = zeta * w
    coef_b = (v_t + sig * x_t) / w_d
    env = np.exp(-sig * s)
    x = env * (x_t * np.cos(w_d * s) + coef_b * np.sin(w_d * s))
    v = env * (
        (w_d * coef_b - sig * x_t) * np.cos(w_d * s) - (sig * coef_b + w_d * x_t) * np.sin(w_d * s)
    )
    ref[tau > width] = phi * (-2.0 * sig * v - w**2 * x)
    assert inside.sum() > 10
    np.testing.assert_allclose(acc, ref, rtol=0, atol=1e-9 * np.abs(ref).max())
    # Far in the future the envelope exp(-zeta w s) has underflowed: exact zeros, no warning.
    late = modal_acceleration(model, "p", np.array([t0 + 1e7]), t0, width, peak)
    assert np.array_equal(late, np.zeros((1, 1)))


def test_three_mode_response_matches_ode_integration() -> None:
    """All modes and sensors vs direct integration of the modal equations.

    Source: modal superposition a_k = sum_r phi_r(k) q_r'' with
    q_r'' + 2 zeta_r w_r q_r' + w_r^2 q_r = phi_r(j) F(t) (D. J. Ewins, Modal
    Testing: Theory, Practice and Application, 2nd ed., 2000, ch. 2),
    integrated with scipy.integrate.solve_ivp (DOP853, rtol 1e-11) in two
    segments split at the end of the pulse. The closed form is evaluated in
    chunks of 256 samples, at the default sensors and at roving points.
    """
    model = _three_mode_model()
    width, peak, drive = 0.6e-3, 80.0, "p1"
    fs = 20_000.0
    t = np.arange(2048) / fs
    t0 = 23.37 / fs  # between two samples
    w = model.omega
    zeta = model.damping_ratio
    phi_j = model.shape_at(drive)

    def rhs(tau: float, y: FloatArray) -> FloatArray:
        q, qd = y[:3], y[3:]
        force = peak * math.sin(math.pi * tau / width) if tau <= width else 0.0
        out: FloatArray = np.concatenate([qd, phi_j * force - 2.0 * zeta * w * qd - w**2 * q])
        return out

    tau = t - t0
    q = np.zeros((3, t.size))
    qd = np.zeros((3, t.size))
    state = np.zeros(6)
    for lo, hi, sel in (
        (0.0, width, (tau >= 0.0) & (tau <= width)),
        (width, tau[-1] + 1.0 / fs, tau > width),
    ):
        # The segment end is appended to t_eval so the next segment starts from it.
        sol = solve_ivp(
            rhs,
            (lo, hi),
            state,
            method="DOP853",
            rtol=1e-11,
            atol=1e-18,
            t_eval=np.append(tau[sel], hi),
        )
        assert sol.success
        q[:, sel], qd[:, sel] = sol.y[:3, :-1], sol.y[3:, :-1]
        state = sol.y[:, -1]
    force = half_sine(tau, width, peak)
    q_dd = phi_j[:, None] * force - 2.0 * zeta[:, None] * w[:, None] * qd - w[:, None] ** 2 * q

    for points in (None, ["p3", "p1", "p4"]):
        labels = list(model.sensors.values()) if points is None else points
        ref = model.shapes_at(labels) @ q_dd
        chunks = [
            modal_acceleration(model, drive, t[i : i + 256], t0, width, peak, points)
            for i in range(0, t.size, 256)
        ]
        got = np.concatenate(chunks, axis=1)
        assert got.shape == (len(labels), t.size)
        np.testing.assert_allclose(got, ref, rtol=0, atol=1e-10 * np.abs(ref).max())


@pytest.mark.parametrize("sigma", [0.0, 30.0])
def test_accelerance_matches_fft_of_time_response(sigma: float) -> None:
    """Analytic accelerance vs FFT of the closed-form response / pulse spectrum.

    Sources: numpy.fft.rfft of the sampled closed-form response (rectangle
    rule, record 1 s, decayed below 1e-16), divided by the pulse's analytic
    transform (standard half-sine pair, see above); for sigma > 0 both the
    response and the force carry the exponential window exp(-sigma (t - t0)),
    whose transform is the plain one at s = sigma + i w (Laplace shift
    theorem, Oppenheim & Willsky, Signals and Systems, 2nd ed., 1997,
    sec. 9.5). Accelerance as modal sum -w^2 phi phi / (w_r^2 - w^2 +
    2 i zeta_r w_r w) (Ewins, Modal Testing, 2nd ed., 2000, ch. 2).
    """
    model = _three_mode_model()
    width, peak, drive, resp = 0.25e-3, 40.0, "p3", "p2"
    fs = 400_000.0
    n = 400_000
    dt = 1.0 / fs
    t = np.arange(n) * dt
    t0 = 0.37 * dt
    acc = modal_acceleration(model, drive, t, t0, width, peak, [resp])[0]
    weighted = acc * np.exp(-sigma * np.clip(t - t0, 0.0, None))
    freqs = np.fft.rfftfreq(n, dt)
    band = (freqs > 0.0) & (freqs <= 4000.0)
    f = freqs[band]
    spectrum = dt * np.fft.rfft(weighted)[band] * np.exp(2j * np.pi * f * t0)
    measured = spectrum / half_sine_spectrum(f, width, peak, extra_decay_per_s=sigma)
    analytic = accelerance(model, drive, resp, f, extra_decay_per_s=sigma)
    scale = np.abs(analytic).max()
    np.testing.assert_allclose(measured, analytic, rtol=0, atol=2e-5 * scale)

    # Independent modal sum in the -w^2 form, at the shifted frequency w - i sigma.
    om = 2.0 * np.pi * f - 1j * sigma
    c = model.shape_at(resp) * model.shape_at(drive)
    wr, zr = model.omega, model.damping_ratio
    direct = sum(
        c[r] * (-(om**2)) / (wr[r] ** 2 - om**2 + 2j * zr[r] * wr[r] * om) for r in range(3)
    )
    np.testing.assert_allclose(analytic, direct, rtol=1e-12)


def test_demo_panel_layout() -> None:
    """Demo panel: 30 inset grid points, sensors off the low-mode nodal lines.

    Source: nodal lines of sin(m pi x/a) sin(n pi y/b) (Leissa, Vibration of
    Plates, NASA SP-160, 1969, ch. 4), evaluated here for the first 30 modes
    (up to about 1.4 kHz): |sin sin| stays above 0.05 at both sensors.
    """
    panel = demo_panel()
    a, b = 0.60, 0.40
    assert len(panel.grid) == 30
    assert len(set(panel.grid)) == 30
    xy = np.array([panel.coords[panel.index(g)][:2] for g in panel.grid])
    assert np.all((xy[:, 0] > 0.0) & (xy[:, 0] < a) & (xy[:, 1] > 0.0) & (xy[:, 1] < b))
    assert panel.driving_sensors() == {"acc1": DEMO_DRIVING_POINT}
    assert DEMO_DRIVING_POINT in panel.grid
    assert set(panel.sensors) == {"acc1", "acc2"}
    assert panel.sensors["acc2"] not in panel.grid
    _, orders = _leissa_freqs(a, b, 0.003, 69e9, 0.33, 2700.0, 5000.0)
    for point in panel.sensors.values():
        x, y = panel.coords[panel.index(point)][:2]
        for m, n in orders[:30]:
            assert abs(math.sin(m * math.pi * x / a) * math.sin(n * math.pi * y / b)) > 0.05
    assert np.all((panel.damping_ratio > 0.005) & (panel.damping_ratio < 0.015))


def test_truth_file_round_trip(tmp_path: Path) -> None:
    """Truth JSON: the agreed layout parses with the stdlib (RFC 8259) and reloads exactly.

    Source: Python's json module as the independent parser; values compared
    with the model arrays bit for bit (JSON floats written as shortest repr).
    """
    panel = demo_panel(f_max_hz=800.0)
    path = tmp_path / "truth.json"
    write_truth(panel, path)
    data = json.loads(path.read_text(encoding="utf-8"))
    assert data == truth_dict(panel)
    assert data["units"] == {"freq": "Hz", "shape": "kg^-1/2"}
    assert data["sensors"] == {"acc1": "B3", "acc2": "X1"}
    assert data["grid"] == list(panel.grid)
    assert isinstance(data["structure"], str) and data["structure"]
    assert len(data["modes"]) == panel.n_modes
    mode = data["modes"][1]
    assert mode["freq_hz"] == panel.freqs_hz[1]
    assert mode["damping_ratio"] == panel.damping_ratio[1]
    assert mode["shape"]["X1"] == panel.shape_at("X1")[1]
    assert data["points"]["X1"] == [0.467, 0.328, 0.0]

    back = load_truth(path)
    assert back.labels == panel.labels
    assert back.grid == panel.grid
    assert dict(back.sensors) == dict(panel.sensors)
    assert back.structure == panel.structure
    for name in ("coords", "freqs_hz", "damping_ratio", "shapes"):
        assert np.array_equal(getattr(back, name), getattr(panel, name))


# --------------------------------------------------------------------------
# The converter's anti-alias filter
# --------------------------------------------------------------------------


def test_anti_alias_filter_design_and_spec() -> None:
    """The filter is Kaiser's windowed sinc and meets its stated band limits.

    Sources: Kaiser's window design formulas (beta and order for attenuation A and
    transition width) and the windowed-sinc low-pass as scipy.signal.kaiser_beta,
    kaiserord and firwin implement them (SciPy reference; Oppenheim & Schafer,
    Discrete-Time Signal Processing, 3rd ed., 2010, §7.6, from memory); the frequency
    response by scipy.signal.freqz on 2^21 points (spacing 1/1000 of a side lobe);
    linear phase from the symmetry of the taps, group delay by scipy.signal.group_delay.
    Spec: within ±0.0001 dB to 0.4·rate, -6.02 dB (gain 1/2) at the cutoff 0.45·rate, at
    least 99.9 dB down from 0.5·rate to the fine grid's Nyquist frequency R/2·rate.
    """
    filt = converter_filter()
    r, a = filt.oversample, filt.attenuation_db
    for atten in (30.0, 40.0, 60.0, 100.0):
        assert kaiser_beta(atten) == pytest.approx(signal.kaiser_beta(atten), rel=1e-12)
    numtaps, beta = signal.kaiserord(a, 2.0 * (filt.stopband - filt.passband) / r)
    assert filt.length == numtaps | 1  # scipy's order, made odd for a whole-sample delay
    reference = signal.firwin(filt.length, 0.45, window=("kaiser", beta), fs=r)
    np.testing.assert_allclose(filt.taps, reference, rtol=0, atol=1e-15)
    assert np.array_equal(filt.taps, filt.taps[::-1])

    w, resp = signal.freqz(filt.taps, worN=2**21)
    f_out = w / (2.0 * np.pi) * r  # in units of the output rate
    db = 20.0 * np.log10(np.maximum(np.abs(resp), 1e-300))
    assert np.abs(db[f_out <= filt.passband]).max() <= 0.0001
    assert db[f_out >= filt.stopband].max() <= -99.9
    assert np.interp(0.45, f_out, np.abs(resp)) == pytest.approx(0.5, abs=1e-4)
    probe = 2.0 * np.pi * np.array([0.01, 0.1, 0.2, 0.3, 0.4]) / r
    _, delay = signal.group_delay((filt.taps, [1.0]), w=probe)
    np.testing.assert_allclose(delay, filt.half, atol=1e-6)

    # The compensated response is freqz's times exp(i w half): real and equal to |H| in the
    # passband; at complex s it is the direct sum over the taps.
    rate = 51_200.0
    sel = slice(0, None, 997)
    zero_phase = resp[sel] * np.exp(1j * w[sel] * filt.half)
    gain = filt.frequency_response(f_out[sel] * rate, rate)
    np.testing.assert_allclose(gain, zero_phase.real, rtol=0, atol=1e-12)
    np.testing.assert_allclose(zero_phase.imag, 0.0, atol=1e-12)
    model = demo_panel()
    lam = -model.damping_ratio * model.omega + 1j * model.omega * np.sqrt(
        1.0 - model.damping_ratio**2
    )
    lag = (filt.half - np.arange(filt.length)) / (r * rate)
    direct = np.exp(np.outer(lam, lag)) @ filt.taps
    np.testing.assert_allclose(filt.transfer(lam, rate), direct, rtol=1e-12)
    with pytest.raises(ValueError):
        AntiAliasFilter(passband=0.5, stopband=0.4)


def _fine_reference(
    model: ModalModel, pulses: list[Pulse], n: int, rate: float, filt: AntiAliasFilter
) -> FloatArray:
    """Force and accelerations (1 + n_sensors, n) the brute-force way: the closed form on the
    R-times-finer grid, numpy.convolve with scipy.signal.firwin's taps, every R-th sample,
    with the delay of `half` fine samples taken out (fine sample R k + half - j under tap j)."""
    r = filt.oversample
    _, beta = signal.kaiserord(filt.attenuation_db, 2.0 * (filt.stopband - filt.passband) / r)
    taps = signal.firwin(filt.length, 0.45, window=("kaiser", beta), fs=r)
    t_fine = (np.arange(r * (n - 1) + filt.length) - filt.half) / (r * rate)
    fine = np.zeros((1 + len(model.sensors), t_fine.size))
    for p in pulses:
        fine[0] += half_sine(t_fine - p.t0_s, p.width_s, p.peak_n)
        fine[1:] += modal_acceleration(model, p.point, t_fine, p.t0_s, p.width_s, p.peak_n)
    return np.array([np.convolve(row, taps, mode="valid")[::r] for row in fine])


def _synthesise(
    model: ModalModel,
    pulses: list[Pulse],
    n: int,
    rate: float,
    chunk: int,
    anti_alias: bool,
    late: Pulse | None = None,
) -> FloatArray:
    """The synthesiser's force and accelerations (1 + n_sensors, n), chunk by chunk;
    `late` is added after the first chunk."""
    synth = ResponseSynth(model, rate, chunk, anti_alias=anti_alias)
    for p in pulses:
        synth.add(p)
    parts = []
    for i in range(-(-n // chunk)):
        if i == 1 and late is not None:
            synth.add(late)
        force, accel = synth.next_chunk()
        parts.append(np.vstack([force[None, :], accel]))
    return np.concatenate(parts, axis=1)[:, :n]


def test_filtered_synthesis_equals_oversampling_then_filtering() -> None:
    """The synthesiser's filtered chunks equal brute-force oversampling, filtering, decimation.

    Source: the definition of the decimating filter, y[k] = sum_j h[j] x((R k + half - j) /
    (R rate)), computed by numpy.convolve on the closed-form signals (checked above against
    scipy.integrate.solve_ivp) on the 64-times-finer grid with scipy.signal.firwin's taps.
    Overlapping pulses of three widths, one across a chunk boundary, with chunks of 256 and
    of 100 samples (the filter's state carries across chunks: the output does not depend
    on the chunk length); error below 1e-12 of the peak. Without the filter the
    synthesiser gives the closed form point-sampled at k / rate, as before.
    """
    model = _three_mode_model()
    rate, n = 20_000.0, 2048
    pulses = [
        Pulse("p1", 0.01 + 0.37 / rate, 0.6e-3, 80.0),  # at the 100-sample chunk boundary
        Pulse("p3", 0.0103 + 0.81 / rate, 0.25e-3, 30.0),  # starts while the first acts
        Pulse("p2", 0.0127 + 0.5 / rate, 2.0e-3, 15.0),  # across the 256-sample boundary
        Pulse("p1", 0.06, 0.2e-3, 5.0),
    ]
    reference = _fine_reference(model, pulses, n, rate, converter_filter())
    scale = np.abs(reference).max(axis=1, keepdims=True)
    for chunk in (256, 100):
        got = _synthesise(model, pulses, n, rate, chunk, anti_alias=True)
        assert np.all(np.abs(got - reference) <= 1e-12 * scale), chunk
    t = np.arange(n) / rate
    plain = _synthesise(model, pulses, n, rate, 256, anti_alias=False)
    point = np.zeros_like(plain)
    for p in pulses:
        point[0] += half_sine(t - p.t0_s, p.width_s, p.peak_n)
        point[1:] += modal_acceleration(model, p.point, t, p.t0_s, p.width_s, p.peak_n)
    np.testing.assert_allclose(plain, point, rtol=0, atol=1e-12 * np.abs(point).max())


def test_filtered_synthesis_of_a_late_pulse() -> None:
    """A pulse added less than `lead_s` ahead loses only the precursor already generated.

    Source: the brute-force reference of the previous test. The pulse starts 10 samples
    after the next chunk, inside the filter's reach of 32 samples: from the next chunk on
    the output is exact; the samples already generated (the structure at rest, zeros) miss
    the precursor, which the reference shows is not zero. lead_s is the filter's reach,
    half the taps at 64 × rate.
    """
    model = _three_mode_model()
    rate, n, chunk = 20_000.0, 1024, 128
    filt = converter_filter()
    synth = ResponseSynth(model, rate, chunk, anti_alias=True)
    assert synth.lead_s == filt.half / (filt.oversample * rate)
    assert ResponseSynth(model, rate, chunk).lead_s == 0.0
    late = Pulse("p2", (chunk + 10.3) / rate, 0.5e-3, 40.0)
    reference = _fine_reference(model, [late], n, rate, filt)
    got = _synthesise(model, [], n, rate, chunk, anti_alias=True, late=late)
    scale = np.abs(reference).max(axis=1, keepdims=True)
    assert np.all(np.abs(got[:, chunk:] - reference[:, chunk:]) <= 1e-12 * scale)
    assert np.array_equal(got[:, :chunk], np.zeros((3, chunk)))
    assert np.abs(reference[:, :chunk]).max() > 1e-5 * scale.max()
    with pytest.raises(ValueError):
        synth.add(Pulse("p2", -1.0 / rate, 0.5e-3, 40.0))
    # A nearly critical mode far above a low rate: e^{zeta w reach} would leave float range.
    fast = ModalModel(
        labels=("p",), coords=np.zeros((1, 3)), freqs_hz=np.array([20_000.0]),
        damping_ratio=np.array([0.9]), shapes=np.array([[1.0]]), sensors={"acc": "p"},
    )  # fmt: skip
    with pytest.raises(ValueError, match="decays too fast"):
        ResponseSynth(fast, 1000.0, chunk, anti_alias=True)
    ResponseSynth(fast, 1000.0, chunk)  # point samples have no such limit
