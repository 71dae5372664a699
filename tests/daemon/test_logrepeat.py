"""Repeated log lines folded per minute (daemon/logrepeat.py), on a clock the test moves."""

from __future__ import annotations

import logging

from taprig.daemon.logrepeat import RepeatFilter, report_folded


class Clock:
    def __init__(self) -> None:
        self.t = 1000.0

    def __call__(self) -> float:
        return self.t


def _record(
    msg: str, *args: object, level: int = logging.WARNING, name: str = "x"
) -> logging.LogRecord:
    return logging.LogRecord(name, level, __file__, 1, msg, args, None)


def test_repeats_fold_into_one_line_and_a_count() -> None:
    clock = Clock()
    f = RepeatFilter(clock=clock)
    passed = []
    for port in range(1000):  # the same complaint, only the numbers differ
        r = _record("connection from 127.0.0.1:%d refused", port)
        if f.filter(r):
            passed.append(r.getMessage())
        clock.t += 0.01  # 1,000 in 10 s
    assert passed == ["connection from 127.0.0.1:0 refused"]
    clock.t += 60.0
    r = _record("connection from 127.0.0.1:%d refused", 5)
    assert f.filter(r)
    assert r.getMessage() == (
        "connection from 127.0.0.1:5 refused (999 more like this in the last minute)"
    )
    r = _record("connection from 127.0.0.1:%d refused", 6)
    assert not f.filter(r)  # a new minute, folded again


def test_other_kinds_and_quiet_levels_pass() -> None:
    f = RepeatFilter(clock=Clock(), loggers=("taprig.daemon.api.gate",))
    assert f.filter(_record("disk low"))
    assert f.filter(_record("disk gone"))  # another message
    assert f.filter(_record("disk low", name="y"))  # another logger
    assert f.filter(_record("disk low", level=logging.ERROR))  # another level
    for _ in range(3):  # INFO from an ordinary logger: never folded (rig events repeat)
        assert f.filter(_record("hit %s", "B3", level=logging.INFO))
    gate = "taprig.daemon.api.gate"
    assert f.filter(_record("closed %d", 1, level=logging.INFO, name=gate))
    assert not f.filter(_record("closed %d", 2, level=logging.INFO, name=gate))


def test_counts_left_when_repeats_stop_are_reported_on_a_line_of_their_own() -> None:
    clock = Clock()
    f = RepeatFilter(clock=clock)
    lines: list[str] = []

    class Keep(logging.Handler):
        def emit(self, record: logging.LogRecord) -> None:
            lines.append(record.getMessage())

    keep = Keep()
    keep.addFilter(f)
    logger = logging.getLogger("taprig.test.folded")
    logger.addHandler(keep)
    logger.propagate = False
    try:
        for n in range(50):
            logger.warning("accept failed on fd %d", n)
        report_folded(logger)
        assert lines == ["accept failed on fd 0"]  # the minute is not over
        clock.t += 61.0
        report_folded(logger)
        report_folded(logger)  # reported once
        folded = "accept failed on fd 0 (49 more like this in the last minute)"
        assert lines == ["accept failed on fd 0", folded]
        logger.warning("accept failed on fd %d", 99)  # a new window begins
        assert lines[-1] == "accept failed on fd 99"
    finally:
        logger.removeHandler(keep)
        logger.propagate = True
