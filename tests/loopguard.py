"""A guard for tests: notes every asyncio callback that blocks its event loop too long.

Every callback an asyncio loop runs (a task step, a call_soon, a timer) goes through
`asyncio.Handle._run`; `install()` wraps it to time each one. What counts is what the
callback itself did, not what a loaded machine did to it:

- computing: its thread's CPU time over LIMIT_S (not stretched by other processes);
- blocking: wall time minus run-queue wait (descheduled, waiting for a CPU) over
  BLOCKING_LIMIT_S, spent in at most BLOCKING_SLICES scheduling slices, i.e. in one or two
  long waits (a sleep, a join, a blocking read or lock). Waiting for the GIL while this
  process's other threads run also keeps a thread off the CPU, but in many short waits (the
  interpreter hands the GIL over every 5 ms), so a callback merely slowed by its neighbours
  is not counted. Two waits look like blocking and are the machine's load instead: a GIL
  holder that the kernel preempted (the loop thread waits, in one slice, for a thread that is
  itself waiting for a CPU), and `Thread.start` (an executor growing waits for the new thread
  to be scheduled). The first is why the blocking limit is above the computing one; the
  second is timed, as collections are, and taken off.

A garbage collection that happens to fall inside a callback is not the callback's doing: its
length follows the size of the whole test process's heap (hundreds of tests' objects, numpy,
scipy, matplotlib), not of the daemon's. Collections are timed through `gc.callbacks` and their
time is taken off both figures, and named in the verdict.

CPU time, run-queue wait and the number of slices come from Linux's per-thread scheduler
statistics, ``/proc/thread-self/schedstat`` (Documentation/scheduler/sched-stats.rst in the
kernel sources: time on the cpu and time waiting on a runqueue, in ns; timeslices run).
"""

from __future__ import annotations

import asyncio
import gc
import os
import threading
import time
from typing import Any, Final

LIMIT_S: Final = 0.100  # a callback that computes longer than this fails the test
BLOCKING_LIMIT_S: Final = 0.250  # ... or waits longer than this in a few long waits
BLOCKING_SLICES: Final = 4  # at most this many times scheduled: the time went in a few waits
_SCHEDSTAT: Final = "/proc/thread-self/schedstat"

slow: list[str] = []
"""Callbacks that held their loop longer than LIMIT_S since the last `slow.clear()`."""
_lock = threading.Lock()
_local = threading.local()
_original_run = asyncio.events.Handle._run
_original_start = threading.Thread.start


class _StatFile:
    """This thread's schedstat file, kept open (a pread costs about 2 µs); closed with the
    thread's local storage."""

    def __init__(self) -> None:
        self.fd = os.open(_SCHEDSTAT, os.O_RDONLY)

    def read(self) -> tuple[float, float, int]:
        """(s on a CPU, s waiting on a run queue, slices run) since this thread started."""
        on_cpu, queued, slices = os.pread(self.fd, 128, 0).split()[:3]
        return int(on_cpu) / 1e9, int(queued) / 1e9, int(slices)

    def __del__(self) -> None:
        os.close(self.fd)


def _stat() -> _StatFile:
    stat: _StatFile | None = getattr(_local, "stat", None)
    if stat is None:
        stat = _local.stat = _StatFile()
    return stat


def _gc_seconds() -> float:
    """Seconds this thread has spent in garbage collections so far."""
    return float(getattr(_local, "gc_s", 0.0))


def _start_seconds() -> float:
    """Seconds this thread has spent starting other threads so far."""
    return float(getattr(_local, "start_s", 0.0))


def _timed_start(self: threading.Thread) -> None:
    t0 = time.perf_counter()
    try:
        _original_start(self)
    finally:
        _local.start_s = _start_seconds() + time.perf_counter() - t0


def _on_gc(phase: str, _info: dict[str, Any]) -> None:
    """gc.callbacks hook: adds each collection's wall time to its thread's running total."""
    now = time.perf_counter()
    if phase == "start":
        _local.gc_t0 = now
    else:
        _local.gc_s = _gc_seconds() + now - getattr(_local, "gc_t0", now)


def _timed_run(self: asyncio.Handle) -> None:
    stat = _stat()
    before, t0, gc0, start0 = stat.read(), time.perf_counter(), _gc_seconds(), _start_seconds()
    try:
        _original_run(self)
    finally:
        wall = time.perf_counter() - t0
        if wall > LIMIT_S:  # only then is the second read worth it
            verdict = held(wall, before, stat.read(), _gc_seconds() - gc0,
                           _start_seconds() - start0)  # fmt: skip
            if verdict:
                with _lock:
                    slow.append(f"{self!r} {verdict}")


def held(
    wall: float,
    before: tuple[float, float, int],
    after: tuple[float, float, int],
    collecting: float = 0.0,
    starting: float = 0.0,
) -> str:
    """Why a callback of `wall` seconds held its loop, or "" if it did not (module docstring);
    `before` and `after` are `_StatFile.read()` around it, `collecting` and `starting` the
    seconds spent in garbage collections and in starting threads meanwhile, which do not count
    against the callback."""
    cpu, queued, slices = (a - b for a, b in zip(after, before, strict=True))
    waited = wall - queued - cpu
    gc_cpu = min(collecting, cpu)  # a collection computes; what is left of it was queueing
    cpu -= gc_cpu
    waited = max(0.0, waited - (collecting - gc_cpu) - starting)
    if cpu > LIMIT_S:
        return f"computed {cpu * 1e3:.0f} ms (wall {wall * 1e3:.0f} ms)"
    if cpu + waited > BLOCKING_LIMIT_S and slices <= BLOCKING_SLICES:
        return (f"held its loop {(cpu + waited) * 1e3:.0f} ms in {int(slices)} slices "
                f"(wall {wall * 1e3:.0f} ms)")  # fmt: skip
    return ""


def install() -> None:
    """Time every asyncio callback from now on (Linux with scheduler statistics only)."""
    if not os.path.exists(_SCHEDSTAT):
        raise RuntimeError(f"{_SCHEDSTAT} is missing: the event-loop guard needs Linux schedstat")
    handle: Any = asyncio.events.Handle
    handle._run = _timed_run
    gc.callbacks.append(_on_gc)
    thread: Any = threading.Thread
    thread.start = _timed_start
