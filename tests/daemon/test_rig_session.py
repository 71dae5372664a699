"""The operator's session on a running rig (simulated test piece on a real pty, real store):
the test's end, a stray tap after it, measuring a point again, and undoing a wrong accept."""

from __future__ import annotations

import time
from pathlib import Path

import pytest

from taprig.daemon.errors import SessionError

from .test_rig import Events, grid_of, operator_pause, small_rig, tap_and_wait, wait_info


def test_the_last_point_completes_the_test_disarms_and_stray_taps_are_not_stored(
    tmp_path: Path,
) -> None:
    r = small_rig(tmp_path)
    try:
        piece = r.instrument
        assert piece is not None
        ev = Events(r)
        wait_info(r)
        r.rig.create_test("short", grid_of(piece, ["A1", "B2"]))
        r.rig.select_test("short")
        r.rig.arm()
        tap_and_wait(r, ev, "A1", double_hit=True)  # rejected: counted in the tally
        for label in ("A1", "B2"):
            for _ in range(2):
                assert tap_and_wait(r, ev, label).data["counted"]
        done = ev.next("test_complete").data
        assert (done["test"], done["points"], done["grid_points"]) == ("short", 2, 2)
        assert (done["averages"], done["rejected"]) == (4, 1)
        assert done["duration_s"] is not None and done["duration_s"] >= 0
        snap = r.rig.snapshot()
        assert snap["complete"] and not snap["armed"] and snap["tally"] == done
        # A stray tap: the rig is disarmed, nothing is stored.
        operator_pause(r)
        seen = r.rig.view().hits_seen
        piece.tap("B2")
        deadline = time.monotonic() + 10
        while r.rig.view().hits_seen == seen:
            assert time.monotonic() < deadline, "the stray tap never triggered"
            time.sleep(0.01)
        assert len(r.store.list_point_sets(test="short")) == 2
        # Arming a complete test says what to do instead.
        with pytest.raises(SessionError, match="complete: pull it from a workstation"):
            r.rig.arm()
        # Measuring a point again is deliberate; the test completes again after it.
        r.rig.measure_again("A1")
        snap = r.rig.snapshot()
        assert snap["point"] == "A1" and snap["again"] and snap["tally"] is not None
        r.rig.arm()
        for _ in range(2):
            tap_and_wait(r, ev, "A1")
        again = ev.next("test_complete").data
        assert again["points"] == 2 and not r.rig.view().armed
        versions = [s.version for s in r.store.list_point_sets(test="short")]
        assert sorted(versions) == [1, 1, 2]
    finally:
        r.close()


def test_undo_takes_back_a_wrong_accept_before_the_point_is_complete(tmp_path: Path) -> None:
    r = small_rig(tmp_path, "capture.accept=operator")
    try:
        assert r.instrument is not None
        ev = Events(r)
        wait_info(r)
        r.rig.create_test("undo", grid_of(r.instrument, ["C3", "D2"]))
        r.rig.select_test("undo")
        r.rig.arm()
        tap_and_wait(r, ev, "C3")
        assert r.rig.accept().averages == 1
        assert r.rig.snapshot()["can_undo"]
        r.rig.undo()
        snap = r.rig.snapshot()
        assert snap["averages"] == 0 and not snap["can_undo"]
        with pytest.raises(SessionError, match="no counted tap to undo"):
            r.rig.undo()
        for _ in range(2):
            tap_and_wait(r, ev, "C3")
            r.rig.accept()
        ev.next("completed")
        (ps,) = r.store.list_point_sets(test="undo")
        full = r.store.get_point_set(ps.id)
        assert [h.accepted for h in full.hits] == [False, True, True]
        assert full.hits[0].findings[0].message == "undone by the operator"
        # The point is complete and stored: nothing to undo there any more.
        with pytest.raises(SessionError, match="completed point is stored"):
            r.rig.undo()
    finally:
        r.close()
