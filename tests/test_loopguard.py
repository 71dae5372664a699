"""The event-loop guard itself (tests/loopguard.py): it must catch a blocking callback and
must not count a short one."""

from __future__ import annotations

import asyncio
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
    found = _run(lambda: held.wait(0.25))
    assert len(found) == 1 and "held its loop" in found[0], found


def test_a_callback_computing_is_caught() -> None:
    def spin() -> None:
        end = time.perf_counter() + 0.25
        while time.perf_counter() < end:
            pass

    found = _run(spin)
    assert len(found) == 1, found


def test_a_short_callback_passes() -> None:
    assert _run(lambda: threading.Event().wait(0.01)) == []
