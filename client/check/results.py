"""The quick-look check's results: one point, one peak, one driving point, the whole test.

Plain frozen records; ``CheckResult.to_dict()`` is what ``--json`` prints (NaN and inf
become None).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from typing import Any

from ..check_modes import FittedView
from ..dataset import jsonable
from .settings import CheckSettings

__all__ = ["CheckResult", "DrivingPointCheck", "ModePeak", "PointCheck"]


@dataclass(frozen=True, slots=True)
class PointCheck:
    """One point: averages, rejections (reason → count), mean coherence per response in
    the band, the force band's top (Hz) and the flags (codes, see points.py)."""

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
