"""The check as plain text (check.txt): points, modes, fitted modes, driving points."""

from __future__ import annotations

import math

from ..check_modes import report_lines
from .results import CheckResult

__all__ = ["report_text"]


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
