"""The event-loop guard itself (tests/loopguard.py): it must catch a blocking callback and
must not count a short one."""

from __future__ import annotations

import asyncio
import gc
import threading
import time

from tests import loopguard


def _run(callback: object) -> list[str]:
    async def main() -> None:
        loop = asyncio.get_running_loop()
        done = loop.create_future()
        loop.call_soon(lambda: (callback(), done.set_result(None)))  # type: ignore[operator]
        await done

    loopguard.slow.clear()
    asyncio.run(main())
    found = list(loopguard.slow)
    loopguard.slow.clear()  # the test's own blocking is the point here; the autouse guard passes
    return found


def test_a_callback_waiting_on_a_lock_is_caught() -> None:
    """Blocked in a wait (no CPU, not on a run queue): the loop is held for the whole wait."""
    held = threading.Event()
    found = _run(lambda: held.wait(0.4))
    assert len(found) == 1 and "held its loop" in found[0], found


def test_a_callback_computing_is_caught() -> None:
    def spin() -> None:  # 250 ms of this thread's own CPU time, however loaded the machine
        end = time.thread_time() + 0.25
        while time.thread_time() < end:
            pass

    found = _run(spin)
    assert len(found) == 1 and "computed" in found[0], found


def test_time_lost_to_the_machine_or_to_neighbour_threads_is_not_counted() -> None:
    """The verdict on made-up scheduler figures (s on CPU, s queued, slices): 150 ms waiting
    for a CPU is the machine's load; 150 ms off the CPU in 30 slices is GIL hand-overs."""
    start = (1.0, 1.0, 100)
    assert loopguard.held(0.16, start, (1.005, 1.155, 102)) == ""  # descheduled
    assert loopguard.held(0.16, start, (1.010, 1.0, 130)) == ""  # many short waits
    assert loopguard.held(0.16, start, (1.005, 1.0, 102)) == ""  # one wait, under its limit
    assert "held its loop" in loopguard.held(0.3, start, (1.005, 1.0, 102))  # one long wait
    assert "computed" in loopguard.held(0.16, start, (1.150, 1.0, 140))


def test_a_short_callback_passes() -> None:
    assert _run(lambda: threading.Event().wait(0.01)) == []


def test_a_garbage_collection_inside_a_callback_is_not_the_callback_s_doing() -> None:
    """A collection's length follows the whole test process's heap, so its time is taken off:
    150 ms computed, 140 of them collecting, leaves 10 ms; without the collection it counts."""
    start = (1.0, 1.0, 100)
    assert loopguard.held(0.16, start, (1.150, 1.0, 140), collecting=0.140) == ""
    assert "computed" in loopguard.held(0.16, start, (1.150, 1.0, 140), collecting=0.010)


def test_collections_are_timed_per_thread() -> None:
    """The gc.callbacks hook adds a real collection's time to this thread's total."""
    junk = [[i] for i in range(200_000)]  # enough tracked objects for a measurable collection
    before = loopguard._gc_seconds()
    gc.collect()
    assert loopguard._gc_seconds() > before
    del junk


def test_starting_a_thread_is_not_the_callback_s_doing() -> None:
    """Thread.start waits for the new thread to be scheduled: the machine's load, taken off.
    A 300 ms wait of which 290 ms went in starting threads leaves 10 ms."""
    start = (1.0, 1.0, 100)
    assert loopguard.held(0.3, start, (1.005, 1.0, 102), starting=0.29) == ""
    before = loopguard._start_seconds()
    t = threading.Thread(target=lambda: None)
    t.start()
    t.join()
    assert loopguard._start_seconds() > before
