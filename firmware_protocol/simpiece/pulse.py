"""The hammer pulse: one half-sine force pulse on the structure, and a tap's train of them.

A tap is a main pulse and, for a double hit, its weaker echoes.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass


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


def pulse_train(
    point: str, t0_s: float, width_s: float, peak_n: float, echoes: Sequence[tuple[float, float]]
) -> list[Pulse]:
    """A main pulse and its echoes: (delay after the main pulse ends s, fraction of peak)."""
    out = [Pulse(point, t0_s, width_s, peak_n)]
    for delay, fraction in echoes:
        out.append(Pulse(point, t0_s + width_s + delay, width_s, peak_n * fraction))
    return out
