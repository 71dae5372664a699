"""A finished test in numbers, for the operator: what the page shows when the last point is in.

Read from the store, so it tells what was really kept (the latest version of each point),
whichever run of the daemon measured it.
"""

from __future__ import annotations

import datetime as dt
from typing import Any

from .store import Store


def test_tally(store: Store, name: str, grid_points: int) -> dict[str, Any]:
    """{"test", "points", "grid_points", "averages", "rejected", "started_utc",
    "finished_utc", "duration_s"} of test `name`: point sets stored (latest versions), the
    averages and the rejected taps they hold, and the time from the first tap kept to the last
    point completed (seconds; None when no tap time is known)."""
    latest = store.list_point_sets(test=name, latest_only=True)
    averages = rejected = 0
    first_tap: str | None = None
    for summary in latest:
        ps = store.get_point_set(summary.id)
        averages += ps.n_averages
        rejected += sum(1 for h in ps.hits if not h.accepted)
        times = [h.utc for h in ps.hits if h.utc]
        if times and (first_tap is None or min(times) < first_tap):
            first_tap = min(times)
    finished = max((s.completed_utc for s in latest), default=None)
    duration = None
    if first_tap is not None and finished is not None:
        duration = round((_utc(finished) - _utc(first_tap)).total_seconds(), 1)
    return {
        "test": name, "points": len(latest), "grid_points": grid_points, "averages": averages,
        "rejected": rejected, "started_utc": first_tap, "finished_utc": finished,
        "duration_s": duration,
    }  # fmt: skip


def _utc(stamp: str) -> dt.datetime:
    return dt.datetime.fromisoformat(stamp.replace("Z", "+00:00"))
