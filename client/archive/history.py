"""Peak-frequency trend of repeated tests of one part type.

A shop that tests the same part every day wants to see its resonances move (a crack, a
loose bolt, a change of supplier lowers or splits a peak). `trend` takes every archived
test of a part type (see `store.part_of`), oldest first, runs the quick-look check
(client/check/: peaks of the summed FRF with its prominence rule) on each, and follows
each peak of the first test through the others: the nearest peak within `tolerance` (a
fraction of the frequency) is the same mode, else the mode is missing (NaN) in that test.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..check import CheckSettings, check
from .db import ArchiveError
from .reader import Archive

TOLERANCE = 0.1  # a peak within 10 % of a reference peak's frequency is taken as that mode


@dataclass(frozen=True, slots=True)
class TrendRow:
    """One test of the part type: when it was made, its peaks, and each tracked mode."""

    rig_id: str
    rig: str
    test: str
    created_utc: str
    peaks_hz: tuple[float, ...]
    tracked_hz: tuple[float, ...]  # per reference mode: its frequency here, NaN if not found


@dataclass(frozen=True, slots=True)
class Trend:
    """reference_hz: the first test's peaks; rows oldest first; drift: per reference mode,
    (last found − first) / first, as a fraction (NaN when seen once only)."""

    part: str
    reference_hz: tuple[float, ...]
    rows: tuple[TrendRow, ...]
    drift: tuple[float, ...]

    def to_dict(self) -> dict[str, Any]:
        def clean(v: Any) -> Any:
            return None if isinstance(v, float) and not math.isfinite(v) else v

        return {
            "part": self.part,
            "reference_hz": list(self.reference_hz),
            "drift": [clean(d) for d in self.drift],
            "rows": [
                {
                    "rig_id": r.rig_id,
                    "rig": r.rig,
                    "test": r.test,
                    "created_utc": r.created_utc,
                    "peaks_hz": list(r.peaks_hz),
                    "tracked_hz": [clean(f) for f in r.tracked_hz],
                }
                for r in self.rows
            ],
        }


def trend(
    archive: Archive, part: str, settings: CheckSettings | None = None, tolerance: float = TOLERANCE
) -> Trend:
    """The peak-frequency trend of every archived test of `part`, oldest first."""
    found = [t for t in archive.find(part=part) if t.point_sets > 0]
    if not found:
        raise ArchiveError(f"the archive has no measured test of part type {part!r}")
    rows: list[TrendRow] = []
    reference: np.ndarray | None = None
    for t in found:
        with Archive(archive.dsn, t.rig_id) as one:
            result = check(one.load(t.test), settings or CheckSettings())
        peaks = np.array(sorted(m.freq_hz for m in result.modes if math.isfinite(m.freq_hz)))
        if reference is None:
            reference = peaks
        rows.append(
            TrendRow(
                t.rig_id,
                t.rig,
                t.test,
                t.created_utc,
                tuple(float(p) for p in peaks),
                _track(reference, peaks, tolerance),
            )
        )
    assert reference is not None
    tracked = np.array([r.tracked_hz for r in rows], dtype=np.float64).reshape(len(rows), -1)
    drift = []
    for k, ref in enumerate(reference):
        seen = tracked[:, k][np.isfinite(tracked[:, k])]
        drift.append(float((seen[-1] - ref) / ref) if seen.size > 1 else math.nan)
    return Trend(part, tuple(float(f) for f in reference), tuple(rows), tuple(drift))


def _track(reference: np.ndarray, peaks: np.ndarray, tolerance: float) -> tuple[float, ...]:
    """For each reference frequency, the nearest of `peaks` within tolerance; NaN if none."""
    if reference.size == 0:
        return ()
    if peaks.size == 0:
        return tuple(math.nan for _ in reference)
    near = np.abs(peaks[None, :] - reference[:, None])  # (modes, peaks)
    best = near.argmin(axis=1)
    ok = near[np.arange(reference.size), best] <= tolerance * reference
    return tuple(float(peaks[b]) if good else math.nan for b, good in zip(best, ok, strict=True))
