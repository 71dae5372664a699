"""The measuring session: a test plan, a cursor on the current point, and its averages.

Fed checked hits, it keeps the current point's running spectra, every hit and
every rejection, and hands back a completed PointSet when the point has the
averages the plan asks for. Pure state: no threads, no I/O; the rig commits
what it returns.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from typing import Any, Final

import numpy as np

from taprig.schema.pointset import hit_record, utc_now

from ..errors import NotFound, SessionError
from ..records import (
    ChannelSpec,
    Finding,
    GridPoint,
    HitRecord,
    HitVerdict,
    PointSet,
    Role,
    RovingMode,
    StoredHit,
)
from .spectra import (
    HitSpectra,
    SpectralAverager,
    WindowSettings,
    hit_spectra,
    single_average_warning,
)

UNDONE: Final = "undone by the operator"


def no_session() -> dict[str, Any]:
    """What `Session.snapshot` says when no test is selected."""
    return {"test": None, "point": None, "averages": 0, "required": 0, "waiting": False,
            "done": [], "complete": False, "again": False, "can_undo": False}  # fmt: skip


@dataclass(frozen=True)
class Plan:
    """What the session needs of a test: its grid, roving mode, reference and averages."""

    name: str
    grid: tuple[GridPoint, ...]
    roving_mode: RovingMode
    reference: str
    averages: int
    sensor_points: dict[str, str] = field(default_factory=dict)
    """Roving hammer: response label -> where that sensor sits (grid label or "x,y,z" m);
    a label missing here is recorded as "" (unknown)."""


@dataclass(frozen=True, slots=True)
class HitOutcome:
    """What one hit did to the session, for the operator's display and the event stream."""

    point: str
    verdict: HitVerdict
    counted: bool  # added to the point's averages
    waiting: bool  # held for the operator to accept or reject
    averages: int  # accepted averages at this point so far
    completed: PointSet | None


class Session:
    """One test being measured. Not thread-safe: the rig's processing thread owns it."""

    def __init__(
        self,
        plan: Plan,
        channels: Sequence[ChannelSpec],
        rate_hz: float,
        block: int,
        windows: WindowSettings,
        *,
        auto_accept: bool = True,
        meta: dict[str, Any] | None = None,
        done: Sequence[str] = (),
    ) -> None:
        if not plan.grid:
            raise SessionError(f"test {plan.name!r} has an empty grid")
        self.plan = plan
        self.channels = tuple(sorted(channels, key=lambda c: c.index))
        self.force = next(i for i, c in enumerate(self.channels) if c.role is Role.FORCE)
        self.responses = tuple(i for i, c in enumerate(self.channels) if c.role is Role.RESPONSE)
        self.rate_hz = rate_hz
        self.block = block
        self.windows = windows
        self.auto_accept = auto_accept
        self.meta = dict(meta or {})
        self.labels = tuple(p.label for p in plan.grid)
        self.done: set[str] = set(done)
        self._waiting: tuple[HitRecord, HitVerdict] | None = None
        self.cursor = next((p for p in self.labels if p not in self.done), self.labels[0])
        self._new_point()

    @property
    def complete(self) -> bool:
        """Every grid point has a stored point set: the test is done."""
        return self.done.issuperset(self.labels)

    @property
    def again(self) -> bool:
        """The cursor's point was measured before and the operator chose to measure it again."""
        return self._again

    # --- cursor ---------------------------------------------------------------

    def goto(self, label: str) -> None:
        """Move the cursor. A point already measured takes no taps until `measure_again`."""
        if label not in self.labels:
            raise NotFound(f"point {label!r} is not on the grid of test {self.plan.name!r}")
        self.cursor = label
        self._new_point()

    def measure_again(self, label: str) -> None:
        """Open a measured point for a new version, deliberately (the old one stays stored)."""
        if label in self.labels and label not in self.done:
            raise SessionError(f"point {label} has not been measured yet: just tap it")
        self.goto(label)  # NotFound for a label not on the grid
        self._again = True

    def step(self, delta: int) -> None:
        """Next (+1) or previous (-1) point on the grid, wrapping round."""
        i = self.labels.index(self.cursor)
        self.goto(self.labels[(i + delta) % len(self.labels)])

    def redo(self) -> None:
        """Start the current point again; a completed version stays in the store."""
        again = self._again
        self._new_point()
        self._again = again

    def undo(self) -> int:
        """Take back the last counted tap of the current point (a wrong Accept): it stays among
        the point's hits as rejected by the operator. Returns the averages left.

        A point's averages are summed again from the taps still counted, so the result is
        exactly that of a point that never had the undone tap. SessionError when there is
        nothing to take back (no tap counted here yet, or the point is complete and stored).
        """
        if not self._counted:
            raise SessionError(
                f"no counted tap to undo at {self.cursor} (a completed point is stored: "
                "measure it again to replace it)"
            )
        index, _ = self._counted.pop()
        old = self._hits[index]
        undone = (Finding("operator", UNDONE), *old.findings)
        self._hits[index] = replace(old, accepted=False, findings=undone)
        self._avg = SpectralAverager(len(self.responses), self.block, self.rate_hz)
        for _, spectra in self._counted:
            self._avg.add(spectra)
        return self._avg.count

    @property
    def can_undo(self) -> bool:
        """A tap counted at the current point can be taken back."""
        return bool(self._counted)

    @property
    def point_is_closed(self) -> bool:
        """The cursor's point is measured and not opened again: a tap here is not stored."""
        return self.cursor in self.done and not self._again

    @property
    def averages(self) -> int:
        return self._avg.count

    def snapshot(self) -> dict[str, Any]:
        """The session for the operator's display (`no_session` without a test)."""
        return {"test": self.plan.name, "point": self.cursor, "averages": self.averages,
                "required": self.plan.averages, "waiting": self.waiting,
                "done": sorted(self.done), "complete": self.complete, "again": self._again,
                "can_undo": self.can_undo}  # fmt: skip

    def running_frf(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray] | None:
        """(freq Hz, H1 (n_resp, n_freq), γ², Gff (n_freq,) N²/Hz) of the current point so
        far; None before one."""
        if self._avg.count == 0:
            return None
        return self._avg.freq_hz, self._avg.h1(), self._avg.coherence(), self._avg.gff

    @property
    def waiting(self) -> bool:
        return self._waiting is not None

    # --- hits -----------------------------------------------------------------

    def on_hit(self, record: HitRecord, verdict: HitVerdict) -> HitOutcome:
        if self.point_is_closed:
            # A stray tap after the point (or the whole test) was done: never a new version.
            why = Finding("point_done", f"{self.cursor} is already measured; choose "
                          "'measure again' to replace it")  # fmt: skip
            closed = replace(verdict, accepted=False, rejections=(why, *verdict.rejections))
            return self._outcome(closed, counted=False)
        if not verdict.accepted:
            self._keep(record, verdict, accepted=False)
            return self._outcome(verdict, counted=False)
        if not self.auto_accept:
            self._waiting = (record, verdict)
            return self._outcome(verdict, counted=False, waiting=True)
        return self._count(record, verdict)

    def accept(self) -> HitOutcome:
        """The operator accepts the hit held for them."""
        record, verdict = self._take_waiting()
        return self._count(record, verdict)

    def reject(self, reason: str = "rejected by the operator") -> HitOutcome:
        """The operator rejects the hit held for them."""
        record, verdict = self._take_waiting()
        finding = Finding("operator", reason)
        rejected = HitVerdict(
            False, (*verdict.rejections, finding), verdict.warnings,
            verdict.peak_force_n, verdict.pulse_width_s, verdict.pulse_end,
        )  # fmt: skip
        self._keep(record, rejected, accepted=False)
        return self._outcome(rejected, counted=False)

    def _take_waiting(self) -> tuple[HitRecord, HitVerdict]:
        if self._waiting is None:
            raise SessionError("no hit is waiting for a decision")
        held = self._waiting
        self._waiting = None
        return held

    def _count(self, record: HitRecord, verdict: HitVerdict) -> HitOutcome:
        spectra = hit_spectra(
            record.data, self.force, self.responses, record.pretrigger, verdict.pulse_end,
            record.rate_hz, self.windows,
        )  # fmt: skip
        self._avg.add(spectra)
        self._tau_s = spectra.tau_s
        self._counted.append((len(self._hits), spectra))
        self._keep(record, verdict, accepted=True)
        completed = None
        if self._avg.count >= self.plan.averages:
            completed = self._point_set()
            self.done.add(self.cursor)
        outcome = self._outcome(verdict, counted=True, completed=completed)
        if completed is not None:
            self._advance()
        return outcome

    def _keep(self, record: HitRecord, verdict: HitVerdict, *, accepted: bool) -> None:
        # The device's codes with their scale (schema.pointset "hit data"), not SI floats;
        # values no code can give (beyond 32 bits, NaN) are kept as SI values instead.
        try:
            data, scale = hit_record(record.data, record.per_count, record.code_bits)
        except ValueError:
            data, scale = hit_record(record.data, None)
        self._hits.append(
            StoredHit(
                trigger_index=record.trigger_index,
                utc=utc_now(),
                accepted=accepted,
                peak_force_n=verdict.peak_force_n,
                pulse_width_s=verdict.pulse_width_s,
                findings=verdict.rejections + verdict.warnings,
                data=data,
                scale=scale,
            )
        )

    def _outcome(
        self,
        verdict: HitVerdict,
        *,
        counted: bool,
        waiting: bool = False,
        completed: PointSet | None = None,
    ) -> HitOutcome:
        return HitOutcome(self.cursor, verdict, counted, waiting, self._avg.count, completed)

    def _advance(self) -> None:
        """After a completed point, move to the next point not yet measured (if any)."""
        i = self.labels.index(self.cursor)
        order = self.labels[i + 1 :] + self.labels[: i + 1]
        nxt = next((p for p in order if p not in self.done), None)
        if nxt is not None:
            self.cursor = nxt
        self._new_point()

    def _new_point(self) -> None:
        self._avg = SpectralAverager(len(self.responses), self.block, self.rate_hz)
        self._hits: list[StoredHit] = []
        self._counted: list[tuple[int, HitSpectra]] = []  # (index in _hits, its spectra)
        self._waiting = None
        self._again = False
        self._tau_s = float("inf")

    # --- the completed point set ---------------------------------------------

    def _point_set(self) -> PointSet:
        plan = self.plan
        resp = [self.channels[i] for i in self.responses]
        labels = tuple(c.label for c in resp)
        if plan.roving_mode is RovingMode.HAMMER:
            drive = self.cursor
            # "" where the sensor's place was never given: unknown, not guessed
            points = tuple(plan.sensor_points.get(label, "") for label in labels)
        else:
            drive = plan.reference
            points = (self.cursor,) * len(labels)
        meta = {
            **self.meta,
            "sample_rate_hz": self.rate_hz,
            "block": self.block,
            "exp_tau_s": self._tau_s,
            "windows": {
                "force_margin_s": self.windows.force_margin_s,
                "force_taper_s": self.windows.force_taper_s,
                "exponential_end": self.windows.exp_end_value,
            },
            "channels": [
                {
                    "index": c.index, "role": str(c.role), "label": c.label,
                    "sensitivity": c.sensitivity, "unit": c.sensitivity_unit,
                    "si_per_volt": c.si_per_volt,
                }
                for c in self.channels
            ],
            "warnings": [w for w in [single_average_warning(self._avg.count)] if w],
        }  # fmt: skip
        avg = self._avg
        return PointSet(
            test=plan.name,
            point=self.cursor,
            version=0,
            roving_mode=plan.roving_mode,
            drive_point=drive,
            response_labels=labels,
            response_points=points,
            n_averages=avg.count,
            freq_hz=avg.freq_hz,
            h1=avg.h1(),
            h2=avg.h2(),
            coherence=avg.coherence(),
            gff=avg.gff,
            gxx=avg.gxx,
            gfx=avg.gfx,
            hits=tuple(self._hits),
            meta=meta,
            completed_utc=utc_now(),
        )
