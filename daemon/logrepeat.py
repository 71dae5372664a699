"""Repeated log lines folded: one line, then "N more like this in the last minute".

Under attack the same complaint can come thousands of times a second (a refused connection,
a timed-out one, an accept out of descriptors). `RepeatFilter`, set on the daemon's log
handler by the entry point (daemon/cli.py), lets the first record of a kind through and
counts the next ones of the same kind for a minute; the first record of that kind after the
minute goes through with the count appended; and when no such record comes, `report_folded`
(called once a minute by the daemon's lifespan) writes the count on a line of its own. So the
log grows by a line or two per kind per minute however hard it is pushed, and nothing is
hidden: the count says how much was folded.

"The same kind": the same logger, level and message with its digits blanked (peer ports,
descriptor numbers and counts differ from one repeat to the next), and the same exception
type. Records below `min_level` pass untouched unless their logger is one of `loggers`
(the service's gate logs each refusal at INFO or WARNING, all foldable).
"""

from __future__ import annotations

import logging
import re
import threading
import time
from collections import OrderedDict
from collections.abc import Callable, Iterable
from typing import Final

WINDOW_S: Final = 60.0  # how long repeats are folded into one count, seconds
MAX_KINDS: Final = 512  # kinds remembered at once; the oldest are forgotten first
_DIGITS: Final = re.compile(r"\d+")

_Kind = tuple[str, int, str, str]
_REPORT: Final = "folded_report"  # attribute of a record that reports a count: never folded


class _Seen:
    """One kind's window: when it began, how many were folded, the first one's message."""

    __slots__ = ("folded", "level", "message", "name", "start")

    def __init__(self, start: float, record: logging.LogRecord) -> None:
        self.start, self.folded = start, 0
        self.name, self.level, self.message = record.name, record.levelno, record.getMessage()


class RepeatFilter(logging.Filter):
    """Folds repeats of a kind of record within `window_s` (see the module docstring).

    clock: monotonic seconds (tests pass their own). Thread-safe: handlers are called from
    every thread that logs.
    """

    def __init__(
        self,
        *,
        min_level: int = logging.WARNING,
        loggers: Iterable[str] = (),
        window_s: float = WINDOW_S,
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        super().__init__()
        self.min_level, self.loggers = min_level, tuple(loggers)
        self.window_s, self._clock = window_s, clock
        self._lock = threading.Lock()
        self._kinds: OrderedDict[_Kind, _Seen] = OrderedDict()

    def _applies(self, record: logging.LogRecord) -> bool:
        if getattr(record, _REPORT, False):
            return False
        if record.levelno >= self.min_level:
            return True
        return any(record.name == n or record.name.startswith(n + ".") for n in self.loggers)

    def filter(self, record: logging.LogRecord) -> bool:
        if not self._applies(record):
            return True
        kind = _kind_of(record)
        now = self._clock()
        with self._lock:
            seen = self._kinds.get(kind)
            if seen is not None and now - seen.start < self.window_s:
                seen.folded += 1
                return False
            folded = seen.folded if seen is not None else 0
            self._kinds[kind] = _Seen(now, record)
            self._kinds.move_to_end(kind)
            while len(self._kinds) > MAX_KINDS:
                self._kinds.popitem(last=False)
        if folded:
            record.msg = f"{record.getMessage()} ({folded} more like this in the last minute)"
            record.args = None
        return True

    def take_folded(self) -> list[tuple[str, int, str, int]]:
        """(logger, level, first message, count) of each kind whose window has ended with
        records folded; those counts are then cleared."""
        now, out = self._clock(), []
        with self._lock:
            for seen in self._kinds.values():
                if seen.folded and now - seen.start >= self.window_s:
                    out.append((seen.name, seen.level, seen.message, seen.folded))
                    seen.folded = 0
        return out


def report_folded(logger: logging.Logger | None = None) -> None:
    """Log the count of every ended window of the RepeatFilters on `logger`'s handlers (the
    root logger's by default), one line each: "<first message> (N more like this in the
    last minute)"."""
    for handler in (logger or logging.getLogger()).handlers:
        for f in handler.filters:
            if not isinstance(f, RepeatFilter):
                continue
            for name, level, message, count in f.take_folded():
                logging.getLogger(name).log(level, "%s (%d more like this in the last minute)",
                                            message, count, extra={_REPORT: True})  # fmt: skip


def _kind_of(record: logging.LogRecord) -> _Kind:
    exc = record.exc_info[1] if record.exc_info else None
    message = _DIGITS.sub("#", record.getMessage()[:200])
    return (record.name, record.levelno, message, type(exc).__name__ if exc else "")
