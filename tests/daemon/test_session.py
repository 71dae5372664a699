"""The session state machine (daemon/capture/session.py) on its own: no threads, no device.

Hits are built as arrays: a half-sine force pulse and a response that is the force scaled by
`GAIN` and delayed by `DELAY` samples, a system whose FRF is known in closed form.
"""

from __future__ import annotations

import numpy as np
import pytest

from taprig.daemon.capture.session import Plan, Session
from taprig.daemon.capture.spectra import WindowSettings
from taprig.daemon.errors import NotFound, SessionError
from taprig.daemon.records import (
    ChannelSpec,
    Finding,
    GridPoint,
    HitRecord,
    HitVerdict,
    Role,
    RovingMode,
)

RATE_HZ = 10_000.0
BLOCK = 1024
PRE = 64  # pre-trigger samples
WIDTH = 20  # force pulse length, samples (2 ms)
GAIN = 3.0  # response / force, (m/s²)/N
DELAY = 7  # response delay, samples
CHANNELS = (
    ChannelSpec(0, Role.FORCE, "hammer", 2.25, "mV/N", 444.4),
    ChannelSpec(1, Role.RESPONSE, "acc1", 10.2, "mV/g", 961.4),
)
GRID = tuple(GridPoint(label, 0.1 * i, 0.0, 0.0) for i, label in enumerate(["A1", "A2", "A3"]))
# The force window stays flat well past the pulse; no exponential window: the spectra see
# exactly the signals built below.
WINDOWS = WindowSettings(force_margin_s=0.005, force_taper_s=0.001, exp_end_value=None)


def hit(peak_n: float, first_index: int = 0, gain: float = GAIN) -> tuple[HitRecord, HitVerdict]:
    """One hit of the gain-and-delay system, with an accepting verdict."""
    k = np.arange(BLOCK)
    force = np.where((k >= PRE) & (k < PRE + WIDTH), np.sin(np.pi * (k - PRE + 0.5) / WIDTH), 0.0)
    force *= peak_n
    response = gain * np.roll(force, DELAY)  # the pulse ends far from the block's end: no wrap
    data = np.vstack([force, response])
    record = HitRecord(first_index, first_index + PRE, RATE_HZ, data, (False, False),
                       (False, False), gap=False)  # fmt: skip
    verdict = HitVerdict(True, (), (), peak_n, WIDTH / RATE_HZ, PRE + WIDTH)
    return record, verdict


def rejected(peak_n: float) -> tuple[HitRecord, HitVerdict]:
    record, v = hit(peak_n)
    finding = Finding("double_hit", "a second pulse followed the first")
    return record, HitVerdict(False, (finding,), (), v.peak_force_n, v.pulse_width_s, v.pulse_end)


def session(averages: int = 3, *, auto: bool = True, mode: RovingMode = RovingMode.HAMMER,
            done: tuple[str, ...] = (), places: dict[str, str] | None = None) -> Session:
    sensors = places if places is not None else {"acc1": "A2"}  # acc1 sits on A2
    plan = Plan("bench-1", GRID, mode, "A2", averages, sensors)
    return Session(plan, CHANNELS, RATE_HZ, BLOCK, WINDOWS, auto_accept=auto, done=done)


def test_a_sensor_whose_place_is_unknown_is_recorded_as_unknown() -> None:
    """Never the reference or the first grid point: "" says the test never got the place."""
    s = session(averages=1, places={})
    ps = s.on_hit(*hit(100.0)).completed
    assert ps is not None and ps.response_points == ("",)


def test_averages_reached_hand_back_a_point_set_and_move_on() -> None:
    s = session(averages=3)
    assert s.cursor == "A1" and s.averages == 0
    outcomes = [s.on_hit(*hit(peak)) for peak in (80.0, 120.0, 100.0)]
    assert [o.counted for o in outcomes] == [True, True, True]
    assert [o.averages for o in outcomes] == [1, 2, 3]
    assert [o.completed is None for o in outcomes] == [True, True, False]
    ps = outcomes[-1].completed
    assert ps is not None
    assert (ps.test, ps.point, ps.n_averages, ps.drive_point) == ("bench-1", "A1", 3, "A1")
    assert ps.response_labels == ("acc1",) and ps.response_points == ("A2",)  # where it sits
    assert [h.accepted for h in ps.hits] == [True, True, True]
    assert ps.freq_hz.shape == (BLOCK // 2 + 1,) and ps.h1.shape == (1, BLOCK // 2 + 1)
    # The completed point is done; the cursor moved on with fresh averages.
    assert s.done == {"A1"} and s.cursor == "A2" and s.averages == 0


def test_h1_of_a_gain_and_delay_is_exact_and_coherence_is_one() -> None:
    """A response x[n] = g·f[n − d] has X(k) = g·F(k)·exp(−2πi k d / N) (the DFT's shift
    theorem; no wrap here, as both signals are zero near the block's ends), so
    H1 = Gfx/Gff = g·exp(−2πi k d / N) and γ² = |Gfx|²/(Gff·Gxx) = 1 at every line where
    the force has energy, whatever the hits' amplitudes. Source: the definitions of H1 and
    the coherence function in Bendat & Piersol, "Random Data", 4th ed., 2010, ch. 6 and 9
    (chapter numbers from memory)."""
    s = session(averages=3)
    ps = None
    for peak in (50.0, 150.0, 90.0):
        ps = s.on_hit(*hit(peak)).completed
    assert ps is not None
    k = np.arange(BLOCK // 2 + 1)
    want = GAIN * np.exp(-2j * np.pi * k * DELAY / BLOCK)
    live = ps.gff > 1e-9 * ps.gff.max()  # lines where the half-sine has energy
    assert live.sum() > BLOCK // 4
    np.testing.assert_allclose(ps.h1[0, live], want[live], rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(ps.h2[0, live], want[live], rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(ps.coherence[0, live], 1.0, atol=1e-9)
    np.testing.assert_allclose(ps.freq_hz, k * RATE_HZ / BLOCK)


def test_a_rejected_hit_is_kept_but_not_counted() -> None:
    s = session(averages=2)
    out = s.on_hit(*rejected(100.0))
    assert (out.counted, out.waiting, out.averages, out.completed) == (False, False, 0, None)
    s.on_hit(*hit(100.0))
    ps = s.on_hit(*hit(110.0)).completed
    assert ps is not None and ps.n_averages == 2
    assert [h.accepted for h in ps.hits] == [False, True, True]
    assert ps.hits[0].findings[0].code == "double_hit"


def test_manual_policy_holds_each_hit_for_the_operator() -> None:
    s = session(averages=2, auto=False)
    held = s.on_hit(*hit(100.0))
    assert (held.counted, held.waiting, s.waiting, s.averages) == (False, True, True, 0)
    taken = s.accept()
    assert (taken.counted, taken.waiting, s.waiting, s.averages) == (True, False, False, 1)
    s.on_hit(*hit(100.0))
    refused = s.reject()
    assert not refused.counted and not refused.verdict.accepted
    assert refused.verdict.rejections[-1].code == "operator"
    assert s.averages == 1
    with pytest.raises(SessionError, match="no hit is waiting"):
        s.accept()
    s.on_hit(*hit(100.0))
    done = s.accept()
    assert done.completed is not None and done.completed.n_averages == 2
    assert [h.accepted for h in done.completed.hits] == [True, False, True]


def test_cursor_moves_wrap_and_unknown_points_are_not_found() -> None:
    s = session()
    s.step(-1)
    assert s.cursor == "A3"
    s.step(1)
    assert s.cursor == "A1"
    s.goto("A2")
    assert s.cursor == "A2"
    with pytest.raises(NotFound, match="'Z9' is not on the grid"):
        s.goto("Z9")
    assert s.cursor == "A2"


def test_moving_or_redoing_drops_the_averages_so_far() -> None:
    s = session(averages=3)
    s.on_hit(*hit(100.0))
    assert s.averages == 1 and s.running_frf() is not None
    s.redo()
    assert s.averages == 0 and s.running_frf() is None
    s.on_hit(*hit(100.0))
    s.step(1)
    assert s.cursor == "A2" and s.averages == 0


def test_start_skips_done_points_and_completion_skips_them_too() -> None:
    s = session(averages=1, done=("A1",))
    assert s.cursor == "A2"
    s.on_hit(*hit(100.0))
    assert s.cursor == "A3"
    s.on_hit(*hit(100.0))
    assert s.done == {"A1", "A2", "A3"}
    assert s.cursor == "A3"  # nothing left: it stays on the last point measured


def test_roving_sensor_mode_drives_at_the_reference() -> None:
    s = session(averages=1, mode=RovingMode.SENSOR)
    ps = s.on_hit(*hit(100.0)).completed
    assert ps is not None
    assert ps.drive_point == "A2" and ps.response_points == ("A1",)


def test_an_empty_grid_is_refused() -> None:
    with pytest.raises(SessionError, match="empty grid"):
        Session(Plan("empty", (), RovingMode.HAMMER, "A1", 1), CHANNELS, RATE_HZ, BLOCK, WINDOWS)


def test_the_last_point_completes_the_test_and_a_stray_tap_is_not_stored() -> None:
    """Once every point is in, a tap makes no new version: it is refused with a reason."""
    s = session(averages=1)
    assert not s.complete
    for _ in GRID:
        assert s.on_hit(*hit(100.0)).completed is not None
    assert s.complete and s.done == {"A1", "A2", "A3"} and s.cursor == "A3"
    stray = s.on_hit(*hit(100.0))
    assert stray.completed is None and not stray.counted and not stray.verdict.accepted
    assert stray.verdict.rejections[0].code == "point_done"
    assert "measure again" in stray.verdict.rejections[0].message
    assert s.averages == 0 and s.point_is_closed
    # Going to another measured point does not open it either.
    s.goto("A1")
    assert s.on_hit(*hit(100.0)).verdict.rejections[0].code == "point_done"


def test_measuring_again_is_deliberate_and_makes_one_new_version() -> None:
    s = session(averages=2, done=("A1", "A2", "A3"))
    assert s.complete and s.point_is_closed
    with pytest.raises(NotFound):
        s.measure_again("Z9")
    s.measure_again("A2")
    assert s.cursor == "A2" and s.again and not s.point_is_closed
    s.redo()  # starting the point over keeps it open
    assert s.again
    assert s.on_hit(*hit(100.0)).counted
    ps = s.on_hit(*hit(100.0)).completed
    assert ps is not None and ps.point == "A2" and ps.n_averages == 2
    # Done again: closed to taps, the test still complete.
    assert s.complete and not s.again and s.point_is_closed
    assert s.on_hit(*hit(100.0)).verdict.rejections[0].code == "point_done"


def test_measure_again_of_an_open_point_says_to_just_tap_it() -> None:
    s = session()
    with pytest.raises(SessionError, match="not been measured yet"):
        s.measure_again("A2")


def test_undo_takes_back_a_wrong_accept_exactly() -> None:
    """Operator accept: a tap with a wrong response (gain 5, as if the sensor had come loose)
    is accepted by mistake and undone. The point's H1 is then that of the gain-and-delay
    system exactly, g·exp(−2πi k d / N) (the DFT's shift theorem), as if the tap had never been
    counted; the undone tap stays among the point's hits, rejected by the operator."""
    s = session(averages=2, auto=False)
    with pytest.raises(SessionError, match="no counted tap to undo"):
        s.undo()
    s.on_hit(*hit(100.0))
    s.accept()
    s.on_hit(*hit(100.0, gain=5.0))
    s.accept()
    # Two averages were asked for: that accept completed the point, which undo cannot reach.
    assert s.done == {"A1"} and not s.can_undo
    with pytest.raises(SessionError, match="completed point is stored"):
        s.undo()

    s = session(averages=3, auto=False)
    s.on_hit(*hit(100.0))
    s.accept()
    s.on_hit(*hit(120.0, gain=5.0))
    s.accept()
    assert s.averages == 2 and s.can_undo
    assert s.undo() == 1 and s.averages == 1
    s.on_hit(*hit(80.0))
    s.accept()
    s.on_hit(*hit(90.0))
    ps = s.accept().completed
    assert ps is not None and ps.n_averages == 3
    k = np.arange(BLOCK // 2 + 1)
    want = GAIN * np.exp(-2j * np.pi * k * DELAY / BLOCK)
    live = ps.gff > 1e-9 * ps.gff.max()
    np.testing.assert_allclose(ps.h1[0, live], want[live], rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(ps.coherence[0, live], 1.0, atol=1e-9)
    assert [h.accepted for h in ps.hits] == [True, False, True, True]
    assert [f.code for f in ps.hits[1].findings] == ["operator"]
    assert ps.hits[1].peak_force_n == 120.0


def test_undo_twice_goes_back_to_no_average() -> None:
    s = session(averages=3)
    s.on_hit(*hit(100.0))
    s.on_hit(*hit(100.0))
    assert s.undo() == 1 and s.undo() == 0
    assert s.running_frf() is None and not s.can_undo
