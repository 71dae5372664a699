"""The quick-look check: is this test's data good enough to take home? (Not a modal fitter.)

Entry points: ``check(data, settings=CheckSettings()) -> CheckResult`` on a `TestData`
(client/dataset.py); ``report_text(result) -> str`` for check.txt; ``result.to_dict()`` for
``--json``. Pure numpy: no HTTP, no SQLite, no plotting.

Per point (`PointCheck`):

* averages and rejections by reason, as measured;
* usable force band: from the lowest line up to the last line before the force
  autospectrum Gff first falls more than ``force_drop_db`` (default 10 dB) below its
  low-frequency level, the median of Gff over the lowest ``low_fraction`` (2 %) of the lines
  above 0 Hz (at least 4 lines). Judging an FRF only where the hammer put in energy within
  10 to 20 dB of its low-frequency level is common practice; 10 dB is the stricter end;
* mean coherence of each response over the analysis band, up to the point's force band;
* flags (the rules, each with its setting): ``few_averages``: fewer than ``min_averages``
  accepted hits (default: the averages the test asked for, 3 when unknown);
  ``low_coherence``: some response's mean coherence below ``min_coherence`` (0.9);
  ``narrow_force_band``: the force band ends below ``band_share`` (90 %) of the analysis
  band's top (tap again with a harder tip).

Analysis band: ``settings.band_hz`` or, by default, from the first line above 0 Hz to the
median of the points' force-band tops.

Modes (`ModePeak`), from the summed FRF magnitude S(f) = Σ over points and responses |H1|:

* peaks: lines in the analysis band higher than both neighbours whose prominence is at
  least ``min_prominence_db`` (6 dB) and that lie within ``floor_db`` (40 dB) of the
  band's highest value. Prominence as scipy.signal.peak_prominences defines it: from the
  peak, go each way until the signal is higher than the peak (or the band ends); the base
  on that side is the lowest value on the way; the prominence is the peak over the higher
  base (here as a ratio, in dB).
* natural frequency and half-power Q, from the quadrature sum Σ sign(Im H(f_p))·Im H(f)
  over points and responses (each FRF's imaginary part, signed to add up at the peak
  line f_p). Near an isolated, lightly damped mode both |H|² and Im H follow the same
  Lorentzian, 1/((f − f0)² + (ζf0)²) up to a factor (|ω_r² − ω² + 2iζω_rω|² ≈
  4ω_r²((ω − ω_r)² + ζ²ω_r²)), so the quadrature sum falls to half its peak at the
  half-power frequencies; but the other modes' imaginary parts die away as 1/Δf² from
  their resonances where their magnitudes die as 1/Δf, so the quadrature sum carries far
  less of the neighbours than Σ|H| (which widens every peak and biases Q low; quadrature
  peak picking, Ewins 2000, §4.3, from memory). The inverse of the Lorentzian is a
  parabola, a(f − f0)² + c, fitted by least squares to the lines from the first below half
  the peak on the left to the first on the right: the half-power crossings interpolated
  between lines along the curve the mode follows. f0 is the natural frequency,
  Δf = 2·sqrt(c/a) the half-power bandwidth and Q_measured = f0/Δf (half-power method,
  Ewins 2000, §4.3, from memory). A mode whose half level is not reached before a higher
  value has no Q.
* exponential window: the window exp(−t/τ) on force and response adds 1/τ to every
  mode's decay rate (daemon/spectra.py's docstring), so ζ = 1/(2 Q_measured) −
  1/(2π f0 τ) and Q = 1/(2ζ); when the window's share is all of the measured damping
  (ζ <= 0) the mode has no Q (a longer block or a gentler window resolves it).
* deflection shape: per response, Im H1 at the peak line over the points, scaled to a
  largest magnitude of 1. Near an isolated mode H(i, s) ≈ φ(i)φ(s)·g(ω), so Im H over
  the points is the mode shape scaled by the shape at the fixed sensor (roving hammer)
  or the fixed hammer point (roving sensor), by reciprocity. ``response`` names the
  response with the largest Im H at the peak, the one reported.

Fitted modes (`FittedView`, client/check_modes.py, unless ``fit_modes`` is off): the
test's modes by pLSCF and LSFD (client/modal/), set against the peaks: the peaks that hold
more than one mode (a close pair, a repeated root), the modes no peak shows, and, for a
single-reference test, that a repeated root cannot be told from a single mode.

Driving points (`DrivingPointCheck`, every (point, response) pair where the hammer
struck the sensor's own point): with numpy's forward FFT convention (e^{−iωt}) the
accelerance of a lightly damped mode at resonance is A ≈ +i·φ²/(2ζ), so at a driving
point (φ(i) = φ(s)) Im A > 0 at every resonance. Between two resonances an undamped
driving point's receptance rises through zero once (Foster's reactance theorem: R. M.
Foster, "A reactance theorem", Bell System Technical Journal 3, 1924): resonances and
anti-resonances alternate. Through a resonance the phase of A falls by about 180°; through
an anti-resonance it climbs back. Damping (and the window's share) can keep Re A from
reaching zero at a shallow anti-resonance, but the phase still climbs part of the way, so
the rule is: between consecutive resonances the phase climbs by at least
``min_rise_deg`` (30°) somewhere. At a cross point whose modal constants change sign from
one mode to the next there is no anti-resonance and the phase does not climb. The check
finds the driving-point FRF's own resonances (same peak rule, in the analysis band) and
lists the resonances with Im A <= 0 and the pairs with no anti-resonance between them (a
sensor off its point, a sign error, a swapped channel).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from .band import band_of, force_band_tops
from .check_modes import FittedView, fitted_view, report_lines
from .dataset import TestData, jsonable

__all__ = [
    "CheckResult",
    "CheckSettings",
    "DrivingPointCheck",
    "ModePeak",
    "PointCheck",
    "analysis_band",
    "check",
    "half_power",
    "peak_prominences",
    "pick_peaks",
    "report_text",
]

FloatArray = NDArray[np.float64]
IntArray = NDArray[np.intp]


@dataclass(frozen=True, slots=True)
class CheckSettings:
    """The check's thresholds (units beside each); the module docstring gives the rules.

    band_hz: analysis band (F1, F2), Hz; None: first line above 0 Hz to the median of the
    points' force-band tops. force_drop_db: dB below Gff's low-frequency level that ends
    the force band. low_fraction: share of the lines that sets that level.
    min_coherence, min_averages, band_share: the flag thresholds. min_prominence_db,
    floor_db: the peak rule, dB of |H|. min_rise_deg: the phase rise, degrees, that marks
    an anti-resonance at a driving point.
    """

    band_hz: tuple[float, float] | None = None
    force_drop_db: float = 10.0
    low_fraction: float = 0.02
    min_coherence: float = 0.9
    min_averages: int | None = None  # None: the test's planned averages (3 if unknown)
    band_share: float = 0.9
    min_prominence_db: float = 6.0
    floor_db: float = 40.0
    min_rise_deg: float = 30.0
    fit_modes: bool = True  # also fit the modes (client/check_modes.py)

    def __post_init__(self) -> None:
        if not 0.0 < self.force_drop_db <= 60.0:
            raise ValueError(f"force_drop_db {self.force_drop_db!r}; allowed 0 < dB <= 60")
        if not 0.0 < self.low_fraction < 0.5:
            raise ValueError(f"low_fraction {self.low_fraction!r}; allowed 0 < x < 0.5")
        if not 0.0 <= self.min_coherence <= 1.0:
            raise ValueError(f"min_coherence {self.min_coherence!r}; allowed 0..1")
        if not 0.0 < self.band_share <= 1.0:
            raise ValueError(f"band_share {self.band_share!r}; allowed 0 < x <= 1")
        if not self.min_prominence_db > 3.0103:
            # Below 3 dB a peak need not reach its half-power level on either side.
            raise ValueError(f"min_prominence_db {self.min_prominence_db!r}; must exceed 3 dB")
        if not self.floor_db > 0.0:
            raise ValueError(f"floor_db {self.floor_db!r}; must be > 0")
        if self.band_hz is not None:
            f1, f2 = self.band_hz
            if not (math.isfinite(f1) and math.isfinite(f2) and 0.0 <= f1 < f2):
                raise ValueError(f"band {f1!r}:{f2!r} Hz: need finite 0 <= F1 < F2")


@dataclass(frozen=True, slots=True)
class PointCheck:
    """One point: averages, rejections (reason → count), mean coherence per response in
    the band, the force band's top (Hz) and the flags (codes, see the module docstring)."""

    point: str
    n_averages: int
    rejections: dict[str, int]
    mean_coherence: tuple[float, ...]
    force_band_top_hz: float
    flags: tuple[str, ...]

    @property
    def needs_tap(self) -> bool:
        """Whether the point should be measured again."""
        return bool(self.flags)


@dataclass(frozen=True, slots=True)
class ModePeak:
    """A peak of the summed FRF: frequency (Hz), Q with and without the window's share,
    damping ratio (window removed; NaN when unresolved), the peak line's frequency, and the
    deflection shape per response (Im H1 at the peak line over the points, largest = 1)."""

    freq_hz: float
    line_hz: float
    q_measured: float
    q: float
    damping_ratio: float
    prominence_db: float
    response: str
    shapes: dict[str, tuple[float, ...]]
    note: str = ""

    @property
    def shape(self) -> tuple[float, ...]:
        """The deflection shape from the response that sees the mode best."""
        return self.shapes[self.response]


@dataclass(frozen=True, slots=True)
class DrivingPointCheck:
    """One driving point: its resonances (Hz), those with Im A <= 0, and the consecutive
    resonance pairs (Hz, Hz) with no anti-resonance between them."""

    point: str
    response: str
    resonances_hz: tuple[float, ...]
    wrong_sign_hz: tuple[float, ...]
    no_antiresonance_hz: tuple[tuple[float, float], ...]

    @property
    def ok(self) -> bool:
        """Whether the FRF looks like a driving point's."""
        return not self.wrong_sign_hz and not self.no_antiresonance_hz


@dataclass(frozen=True, slots=True)
class CheckResult:
    """The whole check of one test."""

    test: str
    rig: str
    band_hz: tuple[float, float]
    exp_tau_s: float
    points: tuple[str, ...]
    coords: tuple[tuple[float, float, float], ...]
    responses: tuple[str, ...]
    point_checks: tuple[PointCheck, ...]
    modes: tuple[ModePeak, ...]
    driving_points: tuple[DrivingPointCheck, ...]
    settings: CheckSettings = field(default_factory=CheckSettings)
    fitted: FittedView | None = None  # the modal fit against the peaks (check_modes.py)
    unmeasured: tuple[str, ...] = ()  # grid points with no point set yet: to tap too
    grid_points: int = 0  # points in the test's grid (0: unknown)
    sensors_unplaced: tuple[str, ...] = ()  # responses whose place the test never got

    @property
    def coverage(self) -> str:
        """e.g. "15 of 30 points"."""
        total = self.grid_points or len(self.points)
        return f"{len(self.points)} of {total} point{'' if total == 1 else 's'}"

    @property
    def tap_again(self) -> tuple[str, ...]:
        """Flagged points, then the points not measured yet, in grid order."""
        return tuple(pc.point for pc in self.point_checks if pc.needs_tap) + self.unmeasured

    def to_dict(self) -> dict[str, Any]:
        """A JSON-able dict (NaN and inf become None)."""
        out = asdict(self)
        for pc, row in zip(self.point_checks, out["point_checks"], strict=True):
            row["needs_tap"] = pc.needs_tap
        for dp, row in zip(self.driving_points, out["driving_points"], strict=True):
            row["ok"] = dp.ok
        for mode, row in zip(self.modes, out["modes"], strict=True):
            row["shape"] = list(mode.shape)
        out["coverage"], out["tap_again"] = self.coverage, list(self.tap_again)
        cleaned: dict[str, Any] = jsonable(out)
        return cleaned


# --------------------------------------------------------------------------
# Building blocks (pure, vectorised where the work is)
# --------------------------------------------------------------------------


def peak_prominences(y: FloatArray, peaks: IntArray) -> tuple[FloatArray, FloatArray]:
    """Left and right bases of each peak (values of `y`), scipy.signal's definition.

    From the peak, go each way until `y` is strictly higher than the peak or the signal
    ends; the base is the lowest value on the way. Prominence = y[peak] − max(bases).
    """
    left = np.empty(peaks.size)
    right = np.empty(peaks.size)
    for n, p in enumerate(peaks.tolist()):
        top = y[p]
        before = y[:p][::-1]
        stop = np.flatnonzero(before > top)
        run = before[: stop[0] if stop.size else before.size]
        left[n] = min(top, float(run.min())) if run.size else top
        after = y[p + 1 :]
        stop = np.flatnonzero(after > top)
        run = after[: stop[0] if stop.size else after.size]
        right[n] = min(top, float(run.min())) if run.size else top
    return left, right


def pick_peaks(
    y: FloatArray, min_prominence_db: float = 6.0, floor_db: float = 40.0
) -> tuple[IntArray, FloatArray]:
    """Indices of the peaks of positive `y` by the module's rule, and their prominence, dB."""
    y = np.asarray(y, dtype=np.float64)
    if y.size < 3:
        return np.empty(0, dtype=np.intp), np.empty(0)
    inner = (y[1:-1] > y[:-2]) & (y[1:-1] >= y[2:])
    cand = np.flatnonzero(inner) + 1
    cand = cand[y[cand] >= y.max() * 10.0 ** (-floor_db / 20.0)]
    left, right = peak_prominences(y, cand)
    with np.errstate(divide="ignore"):
        prom_db = 20.0 * np.log10(y[cand] / np.maximum(left, right))
    keep = prom_db >= min_prominence_db
    return cand[keep].astype(np.intp), prom_db[keep]


def half_power(freq_hz: FloatArray, power: FloatArray, peak: int) -> tuple[float, float]:
    """(f0 Hz, half-power bandwidth Hz) of the peak of `power` at line `peak`; NaN if unresolved.

    `power`: a positive quantity that follows a single mode's Lorentzian near it, e.g. a
    squared magnitude or a quadrature (imaginary-part) sum. Fits a(f − f0)² + c to
    1/power over the lines from the first below half the peak on the left to the first
    below it on the right (see the module docstring); bandwidth 2·sqrt(c/a).
    """
    top = power[peak]
    level = 0.5 * top
    nan = (math.nan, math.nan)
    if not top > 0.0:
        return nan
    lo = np.flatnonzero(power[:peak][::-1] < level)
    hi = np.flatnonzero(power[peak + 1 :] < level)
    if not (lo.size and hi.size):
        return nan
    i0, i1 = peak - 1 - int(lo[0]), peak + 1 + int(hi[0])
    span = power[i0 : i1 + 1] / top  # scaled to 1 at the peak line for conditioning
    if np.any(span > 1.0) or np.any(span <= 0.0):
        return nan  # a higher value before the half-power level: not an isolated peak
    x = freq_hz[i0 : i1 + 1] - freq_hz[peak]
    a2, a1, a0 = np.polyfit(x, 1.0 / span, 2)
    if not a2 > 0.0:
        return nan
    shift = -a1 / (2.0 * a2)
    c = a0 - a2 * shift * shift
    if not (c > 0.0 and abs(shift) <= x[-1] - x[0]):
        return nan
    return float(freq_hz[peak] + shift), float(2.0 * math.sqrt(c / a2))


def _uphill(y: FloatArray, i: int) -> int:
    """The local maximum of `y` reached by climbing from line `i`."""
    while True:
        if i + 1 < y.size and y[i + 1] > y[i]:
            i += 1
        elif i > 0 and y[i - 1] > y[i]:
            i -= 1
        else:
            return i


# --------------------------------------------------------------------------
# The check
# --------------------------------------------------------------------------


def check(data: TestData, settings: CheckSettings | None = None) -> CheckResult:
    """Run the quick-look check on one test's data (see the module docstring)."""
    s = settings or CheckSettings()
    freq = data.freq_hz
    tops = force_band_tops(freq, data.gff, s.force_drop_db, s.low_fraction)
    band = analysis_band(data, s, tops)
    in_band = (freq >= band[0]) & (freq <= band[1])
    if in_band.sum() < 3:
        raise ValueError(
            f"band {band[0]!r}:{band[1]!r} Hz holds {int(in_band.sum())} frequency lines; "
            "the check needs at least 3"
        )
    lines = np.flatnonzero(in_band)
    lo, hi = int(lines[0]), int(lines[-1]) + 1
    point_checks = tuple(
        _point_check(data, i, tops[i], in_band, band, s) for i in range(len(data.points))
    )
    modes = _modes(data, lo, hi, s)
    driving = tuple(_driving_point(data, row, r, lo, hi, s) for row, r in data.driving_point_rows())
    fitted = None
    if s.fit_modes:
        widths = [m.freq_hz / m.q_measured for m in modes]
        fitted = fitted_view(data, band, [m.freq_hz for m in modes], widths)
    return CheckResult(
        test=data.test,
        rig=data.rig,
        band_hz=band,
        exp_tau_s=data.exp_tau_s,
        points=data.points,
        coords=tuple((float(x), float(y), float(z)) for x, y, z in data.coords),
        responses=data.responses,
        point_checks=point_checks,
        modes=modes,
        driving_points=driving,
        settings=s,
        fitted=fitted,
        unmeasured=data.unmeasured,
        grid_points=len(data.grid),
        sensors_unplaced=tuple(data.meta.get("sensors_missing", ())),
    )


def analysis_band(
    data: TestData, settings: CheckSettings | None = None, tops: FloatArray | None = None
) -> tuple[float, float]:
    """The analysis band (F1, F2), Hz, with the check's settings (client/band.py's rule)."""
    s = settings or CheckSettings()
    return band_of(data.freq_hz, data.gff, s.band_hz, s.force_drop_db, s.low_fraction, tops)


def _point_check(
    data: TestData,
    i: int,
    top_hz: float,
    in_band: np.ndarray,
    band: tuple[float, float],
    s: CheckSettings,
) -> PointCheck:
    judged = in_band & (data.freq_hz <= top_hz)
    if judged.any():
        coherence = tuple(float(v) for v in data.coherence[i][:, judged].mean(axis=1))
    else:
        coherence = tuple(math.nan for _ in data.responses)
    flags = []
    need = s.min_averages if s.min_averages is not None else (data.planned_averages or 3)
    if int(data.n_averages[i]) < need:
        flags.append("few_averages")
    if not judged.any() or min(coherence) < s.min_coherence:
        flags.append("low_coherence")
    if top_hz < s.band_share * band[1]:
        flags.append("narrow_force_band")
    return PointCheck(
        point=data.points[i],
        n_averages=int(data.n_averages[i]),
        rejections=dict(data.rejections[i]),
        mean_coherence=coherence,
        force_band_top_hz=float(top_hz),
        flags=tuple(flags),
    )


def _modes(data: TestData, lo: int, hi: int, s: CheckSettings) -> tuple[ModePeak, ...]:
    freq = data.freq_hz[lo:hi]
    summed = np.abs(data.h1[..., lo:hi]).sum(axis=(0, 1))
    peaks, prom = pick_peaks(summed, s.min_prominence_db, s.floor_db)
    imag = data.h1.imag[..., lo:hi]  # (P, R, F')
    out = []
    for p, prom_db in zip(peaks.tolist(), prom.tolist(), strict=True):
        at_peak = imag[:, :, p]  # (P, R)
        # The quadrature sum: every FRF's imaginary part, signed to add up at this peak.
        quadrature = np.einsum("pr,prf->f", np.sign(at_peak), imag)
        f0, width = half_power(freq, quadrature, _uphill(quadrature, p))
        note = ""
        q_measured = f0 / width if width > 0.0 else math.nan
        if math.isnan(q_measured):
            note = "half-power points not resolved"
            f0 = float(freq[p])
        zeta = 0.5 / q_measured - 1.0 / (2.0 * math.pi * f0 * data.exp_tau_s)
        if not zeta > 0.0:
            if not note:
                note = "the exponential window's damping covers all of the measured damping"
            zeta = math.nan
        norms = np.linalg.norm(at_peak, axis=0)
        shapes = {}
        for r, label in enumerate(data.responses):
            column = at_peak[:, r]
            scale = float(np.max(np.abs(column)))
            shapes[label] = tuple(float(v) for v in (column / scale if scale > 0 else column))
        out.append(
            ModePeak(
                freq_hz=float(f0),
                line_hz=float(freq[p]),
                q_measured=float(q_measured),
                q=0.5 / zeta if zeta > 0.0 else math.nan,
                damping_ratio=float(zeta),
                prominence_db=float(prom_db),
                response=data.responses[int(np.argmax(norms))],
                shapes=shapes,
                note=note,
            )
        )
    return tuple(out)


def _driving_point(
    data: TestData, row: int, r: int, lo: int, hi: int, s: CheckSettings
) -> DrivingPointCheck:
    h = data.h1[row, r, lo:hi]
    freq = data.freq_hz[lo:hi]
    peaks, _ = pick_peaks(np.abs(h), s.min_prominence_db, s.floor_db)
    wrong = tuple(float(freq[p]) for p in peaks if not h[p].imag > 0.0)
    phase = np.unwrap(np.angle(h))
    missing = []
    for a, b in zip(peaks[:-1].tolist(), peaks[1:].tolist(), strict=True):
        between = phase[a + 1 : b]
        # An anti-resonance: somewhere on the way the phase climbs by min_rise_deg.
        rise = between - np.minimum.accumulate(between) if between.size else between
        if not (rise.size and math.degrees(float(rise.max())) >= s.min_rise_deg):
            missing.append((float(freq[a]), float(freq[b])))
    return DrivingPointCheck(
        point=data.points[row],
        response=data.responses[r],
        resonances_hz=tuple(float(freq[p]) for p in peaks),
        wrong_sign_hz=wrong,
        no_antiresonance_hz=tuple(missing),
    )


# --------------------------------------------------------------------------
# Report
# --------------------------------------------------------------------------


def _num(value: float, fmt: str) -> str:
    return "-" if not math.isfinite(value) else format(value, fmt)


def _coh_width(result: CheckResult) -> int:
    """Width of one coherence column: its header "coh <label>" and a space."""
    return max(7, *(len(r) + 5 for r in result.responses))


def report_text(result: CheckResult) -> str:
    """The check as plain text (check.txt): points, modes, driving points, in that order."""
    s = result.settings
    tau = "none" if math.isinf(result.exp_tau_s) else f"{result.exp_tau_s:.4g} s"
    lines = [
        f"quick-look check of test {result.test!r}"
        + (f" (rig {result.rig})" if result.rig else ""),
        f"analysis band {result.band_hz[0]:.1f} to {result.band_hz[1]:.1f} Hz; "
        f"exponential window tau {tau}",
        "",
        f"points ({result.coverage}): force band = Gff within {s.force_drop_db:g} dB "
        f"of its low-frequency level; coherence = its mean over the analysis band, one column "
        f"per response; flags need another tap",
        f"  {'point':<8}{'avg':>4}  {'rejected':<24}"
        + "".join(f"{'coh ' + r:<{_coh_width(result)}}" for r in result.responses)
        + f"{'force to':>10}  flags",
    ]
    for pc in result.point_checks:
        rejected = ", ".join(f"{k} {v}" for k, v in pc.rejections.items()) or "-"
        coh = "".join(f"{_num(c, '.3f'):<{_coh_width(result)}}" for c in pc.mean_coherence)
        lines.append(
            f"  {pc.point:<8}{pc.n_averages:>4}  {rejected:<24}{coh}"
            f"{pc.force_band_top_hz:>8.0f} Hz  {' '.join(pc.flags) or 'ok'}"
        )
    if result.unmeasured:
        lines.append(f"  not measured yet ({len(result.unmeasured)}): "
                     f"{' '.join(result.unmeasured)}")  # fmt: skip
    again = result.tap_again
    lines.append(f"  tap again: {' '.join(again) if again else 'none'}")
    lines += [
        "",
        f"modes ({len(result.modes)}): peaks of the summed |H1|; Q by half power, "
        "exponential window's share removed",
        f"  {'#':>3} {'f (Hz)':>10} {'Q':>8} {'zeta %':>8} {'Q meas':>8} {'prom dB':>8}"
        "  shape from",
    ]
    for n, m in enumerate(result.modes, 1):
        lines.append(
            f"  {n:>3} {m.freq_hz:>10.2f} {_num(m.q, '8.1f'):>8} "
            f"{_num(100.0 * m.damping_ratio, '8.3f'):>8} {_num(m.q_measured, '8.1f'):>8} "
            f"{m.prominence_db:>8.1f}  {m.response}" + (f"  ({m.note})" if m.note else "")
        )
    if result.fitted is not None:
        lines += ["", *report_lines(result.fitted, len(result.modes))]
    lines += ["", "driving points:"]
    if result.sensors_unplaced:
        lines.append(f"  unknown: the test never got the place of "
                     f"{', '.join(result.sensors_unplaced)}")  # fmt: skip
    elif not result.driving_points:
        lines.append("  none in this test")
    for dp in result.driving_points:
        verdict = "ok" if dp.ok else "SUSPECT"
        lines.append(f"  {dp.point} / {dp.response}: {verdict}; {len(dp.resonances_hz)} resonances")
        if dp.wrong_sign_hz:
            hz = ", ".join(f"{f:.1f}" for f in dp.wrong_sign_hz)
            lines.append(f"    Im A <= 0 at resonance: {hz} Hz")
        for a, b in dp.no_antiresonance_hz:
            lines.append(f"    no anti-resonance between {a:.1f} and {b:.1f} Hz")
    return "\n".join(lines) + "\n"
