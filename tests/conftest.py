"""Shared test guards: no test may leave a thread running behind it, and none may block an
asyncio event loop in one callback: 100 ms computing, 250 ms waiting (tests/loopguard.py)."""

from __future__ import annotations

import threading
from collections.abc import Iterator

import pytest

from tests import loopguard

loopguard.install()


@pytest.fixture(autouse=True)
def no_leaked_threads() -> Iterator[None]:
    """Fail a test that starts a thread and does not stop it."""
    before = set(threading.enumerate())
    yield
    deadline = 5.0
    leaked = [t for t in threading.enumerate() if t not in before and t.is_alive()]
    for t in leaked:
        t.join(timeout=deadline)
    still = [t.name for t in leaked if t.is_alive()]
    assert not still, f"threads left running: {still}"


@pytest.fixture(autouse=True)
def no_blocked_event_loop() -> Iterator[None]:
    """Fail a test during which any asyncio callback held its loop too long (loopguard.held)."""
    loopguard.slow.clear()
    yield
    blocked = list(loopguard.slow)
    assert not blocked, "event loop blocked:\n" + "\n".join(blocked)
