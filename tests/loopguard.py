"""A guard for tests: notes every asyncio callback that blocks its event loop too long.

Every callback an asyncio loop runs (a task step, a call_soon, a timer) goes through
`asyncio.Handle._run`; `install()` wraps it to time each one. What counts is the time the
callback kept its loop from running *on its own account*: its wall time minus the time its
thread sat runnable in the kernel's run queue, waiting for a CPU other processes held. So a
callback that computes or waits on I/O, a lock or a sleep for 150 ms is caught, and one
merely descheduled for 150 ms on a loaded 2-core machine is not.

The run-queue wait comes from Linux's per-thread scheduler statistics,
``/proc/thread-self/schedstat`` ("time spent on the cpu", "time spent waiting on a
runqueue", both in ns; Documentation/scheduler/sched-stats.rst in the kernel sources).
"""

from __future__ import annotations

import asyncio
import os
import threading
import time
from typing import Any, Final

LIMIT_S: Final = 0.100  # a callback that holds its loop longer than this fails the test
_SCHEDSTAT: Final = "/proc/thread-self/schedstat"

slow: list[str] = []
"""Callbacks that held their loop longer than LIMIT_S since the last `slow.clear()`."""
_lock = threading.Lock()
_local = threading.local()
_original_run = asyncio.events.Handle._run


class _StatFile:
    """This thread's schedstat file, kept open (a pread costs about 2 µs); closed with the
    thread's local storage."""

    def __init__(self) -> None:
        self.fd = os.open(_SCHEDSTAT, os.O_RDONLY)

    def wait_s(self) -> float:
        """Seconds this thread has waited on a run queue since it started."""
        return int(os.pread(self.fd, 128, 0).split()[1]) / 1e9

    def __del__(self) -> None:
        os.close(self.fd)


def _stat() -> _StatFile:
    stat: _StatFile | None = getattr(_local, "stat", None)
    if stat is None:
        stat = _local.stat = _StatFile()
    return stat


def _timed_run(self: asyncio.Handle) -> None:
    stat = _stat()
    queued0, t0 = stat.wait_s(), time.perf_counter()
    try:
        _original_run(self)
    finally:
        wall = time.perf_counter() - t0
        if wall > LIMIT_S:  # only then is the second read worth it
            held = wall - (stat.wait_s() - queued0)
            if held > LIMIT_S:
                with _lock:
                    slow.append(f"{self!r} held its loop {held * 1e3:.0f} ms "
                                f"(wall {wall * 1e3:.0f} ms)")  # fmt: skip


def install() -> None:
    """Time every asyncio callback from now on (Linux with scheduler statistics only)."""
    if not os.path.exists(_SCHEDSTAT):
        raise RuntimeError(f"{_SCHEDSTAT} is missing: the event-loop guard needs Linux schedstat")
    handle: Any = asyncio.events.Handle
    handle._run = _timed_run
