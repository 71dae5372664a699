"""The owner thread (daemon/owner.py): commands run on it, errors come back, observers told."""

from __future__ import annotations

import threading

import pytest

from taprig.daemon.owner import Owner


class Counter(Owner[str]):
    """A counter only its own thread touches."""

    def __init__(self) -> None:
        super().__init__("counter")
        self.value = 0

    def _run(self) -> None:
        while not self._stop.wait(0.005):
            self._serve_commands()

    def bump(self) -> int:
        self.value += 1
        self._tell(f"bumped to {self.value}")
        return threading.current_thread().ident or 0


def test_commands_run_on_the_owner_thread_and_errors_come_back(
    caplog: pytest.LogCaptureFixture,
) -> None:
    c = Counter()
    told: list[str] = []

    def broken(event: str) -> None:
        raise RuntimeError("observer bug")

    c.subscribe(broken)  # fails first: the next observer is still told
    c.subscribe(told.append)
    c._thread.start()
    try:
        ident = c.call(c.bump)
        assert ident == c._thread.ident and ident != threading.current_thread().ident
        assert [c.call(c.bump) for _ in range(3)] == [ident] * 3
        assert c.call(lambda: c.value) == 4
        assert told == [f"bumped to {n}" for n in range(1, 5)]
        assert "an observer failed" in caplog.text
        with pytest.raises(ZeroDivisionError):
            c.call(lambda: 1 // 0)
    finally:
        c._end_thread()
    assert not c._thread.is_alive()
