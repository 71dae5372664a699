"""What the rig tells and shows other threads: its events, its counters and its view.

`RigEvent`s go to observers on the rig's processing thread; `RigView` is the frozen state the
processing thread publishes whole for every other thread (daemon/rig.py, `Rig.view`).
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass, field
from typing import Any

from taprig.firmware_protocol import DeviceInfo

from .capture.link import LinkState
from .capture.session import HitOutcome, Plan


@dataclass(frozen=True, slots=True)
class RigEvent:
    """Something an operator display wants to know.

    kind: "hit", "completed", "device", "cursor" or "message".
    """

    kind: str
    data: dict[str, Any]


LATENCIES_KEPT = 256  # most recent commit latencies kept for a look (bounded: runs for months)


@dataclass
class RigStats:
    """Counters of the processing thread (which alone writes them)."""

    hits_seen: int = 0
    hits_while_disarmed: int = 0
    commits: int = 0
    commit_latency_s: deque[float] = field(default_factory=lambda: deque(maxlen=LATENCIES_KEPT))
    """Seconds from the last item's arrival to its point set committed, most recent last."""


@dataclass(frozen=True, slots=True)
class RigView:
    """The rig as other threads may see it: published whole by the processing thread.

    plan: the selected test's plan (None: none selected); point: the cursor.
    samples: sample frames decoded so far (the device's sample clock as the rig has read it).
    commit_latency_s: the most recent commit latencies (seconds), oldest first.
    last_hit: a display-sized view of the last hit (daemon/display.py), or None.
    """

    link_state: LinkState
    info: DeviceInfo | None
    armed: bool
    waiting_for_room: bool
    plan: Plan | None
    point: str | None
    samples: int
    hits_seen: int
    hits_while_disarmed: int
    commits: int
    commit_latency_s: tuple[float, ...]
    last_hit: dict[str, Any] | None


def hit_fields(outcome: HitOutcome, *, as_pairs: bool) -> dict[str, Any]:
    """What a hit event and the last-hit view say of one hit's outcome; findings as
    (code, message) pairs for the event, as {"code", "message"} objects for the view."""
    v = outcome.verdict

    def findings(fs: tuple[Any, ...]) -> list[Any]:
        return [(f.code, f.message) if as_pairs else {"code": f.code, "message": f.message}
                for f in fs]  # fmt: skip

    return {
        "point": outcome.point, "accepted": v.accepted, "counted": outcome.counted,
        "waiting": outcome.waiting, "averages": outcome.averages,
        "peak_force_n": v.peak_force_n, "pulse_width_s": v.pulse_width_s,
        "rejections": findings(v.rejections), "warnings": findings(v.warnings),
    }  # fmt: skip
