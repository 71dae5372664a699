"""One thread that owns some state: other threads run commands on it and are told its events.

The owner's thread alone reads and writes the state. Any other thread acts through `call`,
which queues a function, waits for the owner's thread to run it and returns its result (or
raises its error); observers (`subscribe`) are told every event, on the owner's thread. The
rig (daemon/rig.py) is one: its processing thread owns the decoder, the acquirer and the
session.
"""

from __future__ import annotations

import logging
import queue
import threading
from collections.abc import Callable
from concurrent.futures import Future
from typing import Any, Generic, TypeVar

log = logging.getLogger(__name__)
T = TypeVar("T")
E = TypeVar("E")


class Owner(Generic[E]):
    """A thread named `name` running `_run` (the subclass's loop, which calls `_serve_commands`
    each time round and ends when `_stop` is set); events of type E."""

    def __init__(self, name: str) -> None:
        self._commands: queue.SimpleQueue[tuple[Callable[[], Any], Future[Any]]] = (
            queue.SimpleQueue()
        )
        self._observers: list[Callable[[E], None]] = []
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name=name, daemon=True)

    def _run(self) -> None:
        raise NotImplementedError

    def subscribe(self, observer: Callable[[E], None]) -> None:
        """`observer` is called on the owner's thread: it must return quickly."""
        self._observers.append(observer)

    def call(self, fn: Callable[[], T], timeout: float = 10.0) -> T:
        """Run `fn` on the owner's thread and return its result (or raise its error)."""
        fut: Future[T] = Future()
        self._commands.put((fn, fut))
        return fut.result(timeout=timeout)

    def _end_thread(self, timeout_s: float = 5.0) -> None:
        """Ask the loop to end and wait for it (up to `timeout_s`)."""
        self._stop.set()
        if self._thread.is_alive():
            self._thread.join(timeout=timeout_s)

    def _serve_commands(self) -> None:
        """Run every queued command (owner's thread)."""
        while True:
            try:
                fn, fut = self._commands.get_nowait()
            except queue.Empty:
                return
            try:
                fut.set_result(fn())
            except Exception as exc:
                fut.set_exception(exc)

    def _tell(self, event: E) -> None:
        """Tell every observer (owner's thread); one that fails is logged, the rest still told."""
        for observer in self._observers:
            try:
                observer(event)
            except Exception:
                log.exception("an observer failed on %s", getattr(event, "kind", event))
