"""One test's measured data as arrays: what the mirror hands to exports, the check and plots.

`TestData` is the client's plain record of a test: one row per grid point that has a
completed point set (the latest version of each point), stacked into numpy arrays of one
shape, with the metadata a fitter needs. It is built from `taprig.schema.records` records by
`assemble` and knows nothing of HTTP or SQLite.
"""

from __future__ import annotations

import math
from collections import Counter
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from taprig.schema import WARNING_CODES
from taprig.schema.records import WirePointSet, WireTest


@dataclass(frozen=True, slots=True, eq=False)
class TestData:
    """A test's completed point sets, one row per measured grid point, in grid order.

    Shapes: P points (rows), R responses (sensor channels), F frequency lines. The spectra
    travel and are stored as float32 / complex64 (wire schema 2, about 7 significant
    digits); they are widened here, once, so that fitting works in float64.

    ===============  ============  =========  ==========================================
    field            shape         dtype      unit / meaning
    ===============  ============  =========  ==========================================
    freq_hz          (F,)          float64    Hz
    h1, h2           (P, R, F)     complex128 (m/s²)/N, accelerance
    coherence        (P, R, F)     float64    1
    gff              (P, F)        float64    N²/Hz, one-sided force autospectrum
    gxx              (P, R, F)     float64    (m/s²)²/Hz
    coords           (P, 3)        float64    m, of each row's point
    n_averages       (P,)          int64      accepted hits per point set
    ===============  ============  =========  ==========================================

    points: row labels; directions: each row point's direction ("+z"); responses: the
    sensor channel labels (R); response_points: in roving-hammer mode the point each sensor
    sits on (R), in roving-sensor mode the row's own point for every sensor.
    drive_points: the point struck for each row (the row's point in hammer mode, the
    reference in sensor mode). rejections: per row, reason code → count of rejected hits
    ("operator" for a hit rejected by hand with no finding).
    exp_tau_s: the exponential window's time constant, s (inf: none); one value per test
    (the rows must agree). meta: the first row's point-set metadata plus ``rig``,
    ``rig_id``, ``test``, and from the test ``sensors`` (response label -> point, xyz m,
    direction, unit vector) and ``sensors_missing`` (labels never placed);
    point_set_ids / versions / seqs: per row, from the rig.
    grid: the test's whole grid (label, x, y, z, direction), measured or not.
    planned_averages: the averages per point the test asked for (0 when unknown).
    completed_utc: per row, when its point set completed on the rig (ISO 8601 UTC).
    test_meta: the test's own metadata as the rig keeps it (``sensor_points``, and the
    ``outline`` text of its faces and lines when one came with the grid).
    """

    rig: str
    rig_id: str
    test: str
    roving_mode: str
    reference: str
    freq_hz: np.ndarray
    h1: np.ndarray
    h2: np.ndarray
    coherence: np.ndarray
    gff: np.ndarray
    gxx: np.ndarray
    points: tuple[str, ...]
    coords: np.ndarray
    directions: tuple[str, ...]
    responses: tuple[str, ...]
    response_points: tuple[tuple[str, ...], ...]
    drive_points: tuple[str, ...]
    n_averages: np.ndarray
    rejections: tuple[dict[str, int], ...]
    exp_tau_s: float
    point_set_ids: tuple[int, ...]
    versions: tuple[int, ...]
    seqs: tuple[int, ...]
    grid: tuple[tuple[str, float, float, float, str], ...]
    meta: dict[str, Any] = field(default_factory=dict)
    planned_averages: int = 0  # averages per point the test asked for (0: unknown)

    @property
    def unmeasured(self) -> tuple[str, ...]:
        """Grid points without a completed point set, in grid order."""
        have = set(self.points)
        return tuple(row[0] for row in self.grid if row[0] not in have)

    @property
    def coverage(self) -> str:
        """How much of the grid is measured, e.g. "15 of 30 points"."""
        return f"{len(self.points)} of {len(self.grid)} point{'' if len(self.grid) == 1 else 's'}"
    completed_utc: tuple[str, ...] = ()  # per row: when its point set completed, ISO 8601 UTC
    test_meta: dict[str, Any] = field(default_factory=dict)  # the test's own (sensors, outline)

    def driving_point_rows(self) -> list[tuple[int, int]]:
        """(row, response) pairs where the hammer struck the sensor's own point."""
        return [
            (i, r)
            for i, drive in enumerate(self.drive_points)
            for r, at in enumerate(self.response_points[i])
            if at == drive
        ]


class DataError(ValueError):
    """Point sets that cannot be put side by side (different frequency lines, sensors, ...)."""


def tau_of(meta: dict[str, Any]) -> float:
    """The exponential window time constant in a point set's meta, s; inf when none."""
    value = meta.get("exp_tau_s")
    if value is None or (isinstance(value, str) and value.lower() in ("inf", "infinity")):
        return math.inf
    if isinstance(value, int | float) and not isinstance(value, bool):
        return float(value) if value > 0 else math.inf
    raise DataError(f"meta.exp_tau_s: {value!r} is not a time constant in seconds")


def latest(point_sets: Sequence[WirePointSet]) -> list[WirePointSet]:
    """The latest version of each point's point set (highest version, then highest seq)."""
    best: dict[str, WirePointSet] = {}
    for ps in point_sets:
        old = best.get(ps.point)
        if old is None or (ps.version, ps.seq) > (old.version, old.seq):
            best[ps.point] = ps
    return list(best.values())


def assemble(
    test: WireTest, point_sets: Sequence[WirePointSet], rig: str = "", rig_id: str = ""
) -> TestData:
    """Stack the latest point set of every measured point of `test`, in grid order.

    Raises DataError when the point sets disagree on frequency lines, sensors or window.
    """
    chosen = {ps.point: ps for ps in latest([p for p in point_sets if p.test == test.name])}
    order = [row for row in test.grid if row[0] in chosen]
    rows = [chosen[row[0]] for row in order]
    if not rows:
        raise DataError(f"test {test.name!r} has no completed point set yet")
    first = rows[0]
    taus = {tau_of(ps.meta) for ps in rows}
    for ps in rows[1:]:
        if ps.response_labels != first.response_labels:
            raise DataError(
                f"point {ps.point}: sensors {list(ps.response_labels)} differ from "
                f"{list(first.response_labels)} at {first.point}"
            )
        if ps.freq_hz.shape != first.freq_hz.shape or not np.array_equal(ps.freq_hz, first.freq_hz):
            raise DataError(f"point {ps.point}: frequency lines differ from {first.point}'s")
    if len(taus) != 1:
        raise DataError(f"the exponential window differs between points: τ {sorted(taus)} s")
    return TestData(
        rig=rig,
        rig_id=rig_id,
        test=test.name,
        roving_mode=test.roving_mode,
        reference=test.reference,
        freq_hz=np.array(first.freq_hz, dtype=np.float64),
        h1=np.stack([ps.h1 for ps in rows]).astype(np.complex128),
        h2=np.stack([ps.h2 for ps in rows]).astype(np.complex128),
        coherence=np.stack([ps.coherence for ps in rows]).astype(np.float64),
        gff=np.stack([ps.gff for ps in rows]).astype(np.float64),
        gxx=np.stack([ps.gxx for ps in rows]).astype(np.float64),
        points=tuple(ps.point for ps in rows),
        coords=np.array([row[1:4] for row in order], dtype=np.float64).reshape(-1, 3),
        directions=tuple(row[4] for row in order),
        responses=tuple(first.response_labels),
        response_points=tuple(tuple(ps.response_points) for ps in rows),
        drive_points=tuple(ps.drive_point for ps in rows),
        n_averages=np.array([ps.n_averages for ps in rows], dtype=np.int64),
        rejections=tuple(_rejections(ps) for ps in rows),
        exp_tau_s=taus.pop(),
        point_set_ids=tuple(ps.id for ps in rows),
        versions=tuple(ps.version for ps in rows),
        seqs=tuple(ps.seq for ps in rows),
        grid=tuple(test.grid),
        meta={**first.meta, "rig": rig, "rig_id": rig_id, "test": test.name,
              **{k: test.meta[k] for k in _TEST_META if k in test.meta}},
        planned_averages=test.averages,
        completed_utc=tuple(ps.completed_utc for ps in rows),
        test_meta=dict(test.meta),
    )


# The test's own metadata a fitter needs: where the sensors sit, what the grid looked like.
_TEST_META = ("sensors", "sensors_missing", "grid_warnings")


def _rejections(ps: WirePointSet) -> dict[str, int]:
    """Reason code → count over the point set's rejected hits (a hit may carry several)."""
    counts: Counter[str] = Counter()
    for hit in ps.hits:
        if not hit.accepted:
            codes = {code for code, _ in hit.findings if code not in WARNING_CODES} or {"operator"}
            counts.update(codes)
    return dict(sorted(counts.items()))


def jsonable(value: Any) -> Any:
    """A JSON-ready copy of plain data: tuples as lists, keys as str, NaN and ±inf as None."""
    if isinstance(value, dict):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [jsonable(v) for v in value]
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value
