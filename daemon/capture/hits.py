"""Hit checks: is a triggered record a clean tap? Each finding has a code and a sentence.

Pure functions of a HitRecord. A rejection is an outcome, not an exception.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..records import Finding, HitRecord, HitVerdict

PULSE_EDGE = 0.05  # the pulse is where the force exceeds 5 % of its peak

OVERLOAD = "overload"
DOUBLE_HIT = "double_hit"
GAP = "gap"
TOO_SOFT = "too_soft"
UNDECAYED = "undecayed"

# Reason codes and what an operator is told; the sentence is completed with figures.
REASONS = {
    OVERLOAD: "overload: a channel reached full scale, so the record is clipped; tap softer "
    "or raise the input range",
    DOUBLE_HIT: "double hit: the hammer struck twice; let it rebound freely",
    GAP: "link gap: samples were lost during this hit",
    TOO_SOFT: "too soft: the peak force is below the floor",
    UNDECAYED: "response has not died away by the end of the record",
}


@dataclass(frozen=True, slots=True)
class CheckSettings:
    force_channel: int
    response_channels: tuple[int, ...]
    trigger_level_n: float = 5.0
    force_floor_n: float = 2.0
    double_hit_fraction: float = 0.1
    decay_warning_fraction: float = 0.05
    exponential_window: bool = True
    sign: float = 1.0  # -1 for a hammer wired with negative polarity (falling trigger)
    labels: tuple[str, ...] = ()  # each record row's channel label, for messages

    def named(self, rows: list[int]) -> str:
        """Channels by label ("hammer, acc2"); by row number where no label is known."""
        return ", ".join(self.labels[i] if i < len(self.labels) else f"#{i}" for i in rows)


@dataclass(frozen=True, slots=True)
class Pulse:
    """The first force pulse: peak N, indexes into the record [start, end), width s."""

    peak_n: float
    start: int
    end: int
    width_s: float


def find_pulse(force: np.ndarray, trigger: int, rate_hz: float, level_n: float) -> Pulse:
    """The first pulse: from the trigger until the force falls below half the trigger level,
    then its edges refined to where it stays above 5 % of its own peak."""
    after = np.flatnonzero(force[trigger:] < 0.5 * level_n)
    stop = trigger + (int(after[0]) if after.size else force.size - trigger)
    top = trigger + int(np.argmax(force[trigger : max(stop, trigger + 1)]))
    peak = float(force[top])
    edge = PULSE_EDGE * peak
    falls = np.flatnonzero(force[top:] < edge)
    end = top + (int(falls[0]) if falls.size else force.size - top)
    rises = np.flatnonzero(force[: top + 1] < edge)
    start = int(rises[-1]) + 1 if rises.size else 0
    return Pulse(peak, start, end, (end - start) / rate_hz)


def check_hit(record: HitRecord, settings: CheckSettings) -> HitVerdict:
    """Run every check on one record; rejections and warnings in a fixed order."""
    s = settings
    force = record.data[s.force_channel] * s.sign
    pulse = find_pulse(force, record.pretrigger, record.rate_hz, s.trigger_level_n)
    rejections: list[Finding] = []
    warnings: list[Finding] = []
    flags = zip(record.near_full_scale, record.device_overload, strict=True)
    clipped = [i for i, (near, flagged) in enumerate(flags) if near or flagged]
    if clipped:
        rejections.append(Finding(OVERLOAD, f"{REASONS[OVERLOAD]} ({s.named(clipped)})"))
    second = _second_pulse(force, pulse, s.double_hit_fraction)
    if second is not None:
        delay_ms = (second - pulse.end) / record.rate_hz * 1e3
        rejections.append(
            Finding(DOUBLE_HIT, f"{REASONS[DOUBLE_HIT]} (second pulse {delay_ms:.1f} ms later)")
        )
    if record.gap:
        rejections.append(Finding(GAP, REASONS[GAP]))
    if pulse.peak_n < s.force_floor_n:
        rejections.append(
            Finding(
                TOO_SOFT,
                f"{REASONS[TOO_SOFT]} ({pulse.peak_n:.2f} N < {s.force_floor_n:g} N); tap harder",
            )
        )
    undecayed = _undecayed(record.data, s.response_channels, s.decay_warning_fraction)
    if undecayed:
        advice = (
            "the exponential window takes care of it"
            if s.exponential_window
            else "use the exponential window or a longer block"
        )
        warnings.append(
            Finding(UNDECAYED, f"{REASONS[UNDECAYED]} on {s.named(undecayed)}; {advice}")
        )
    return HitVerdict(
        accepted=not rejections,
        rejections=tuple(rejections),
        warnings=tuple(warnings),
        peak_force_n=pulse.peak_n,
        pulse_width_s=pulse.width_s,
        pulse_end=pulse.end,
    )


def _second_pulse(force: np.ndarray, pulse: Pulse, fraction: float) -> int | None:
    """Index of a later force excursion above `fraction` of the first peak, if any."""
    later = np.flatnonzero(force[pulse.end :] > fraction * pulse.peak_n)
    return pulse.end + int(later[0]) if later.size else None


def _undecayed(data: np.ndarray, responses: tuple[int, ...], fraction: float) -> list[int]:
    """Response channels whose last 1/32 of the record still exceeds `fraction` of their peak."""
    if not responses:
        return []
    x = np.abs(data[list(responses)])
    tail = max(1, x.shape[1] // 32)
    peak = x.max(axis=1)
    late = x[:, -tail:].max(axis=1)
    return [
        int(c) for c, p, q in zip(responses, peak, late, strict=True) if p > 0 and q > fraction * p
    ]


def pulse_width_of_half_sine(width_above_edge_s: float) -> float:
    """The base width T of a half-sine whose time above 5 % of its peak is the given width."""
    return width_above_edge_s / (1.0 - 2.0 * math.asin(PULSE_EDGE) / math.pi)
