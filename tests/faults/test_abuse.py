"""The service under abuse, with taprigd as a real process on loopback.

- A neighbour (127.0.0.1) keeps trying to hold 2,000 idle connections, reopening every one
  the rig closes; a paired workstation (127.0.0.2) gets every answer within 1 s, and the
  daemon's log grows by a few kB at most, with no traceback.
- A connection that dribbles its headers out is closed once the header deadline passes;
  a body that dribbles is answered 408 once the body deadline passes.
- Fair share: with 127.0.0.1 holding its whole share, 127.0.0.2 is served; with the whole
  cap in use, a newcomer takes the place of an idle connection of the address holding most.

The 1 s answer and the few-kB log are the goals of the service's design (issue 14), not
outside references. Every wait polls against a deadline.
"""

from __future__ import annotations

import socket
import time
from collections.abc import Iterator
from pathlib import Path

import pytest

from .attack import (
    Neighbour,
    PairedClient,
    closed_within,
    raise_open_file_limit,
    raw_get,
    slow_connection,
)
from .process import Taprigd, wait_until

ANSWER_GOAL_S = 1.0
LOG_CEILING_BYTES = 4096  # "a few kB" while under attack, beside the paired client's own lines
HEADER_S = 2.0  # the header deadline these tests configure (the default is 10 s)


def _attack_log_bytes(log: str) -> int:
    """Bytes of the log that are not the paired client's own access lines (127.0.0.2)."""
    return sum(len(line) + 1 for line in log.splitlines() if "127.0.0.2" not in line)


@pytest.mark.slow
def test_paired_client_is_served_while_a_neighbour_holds_2000_connections(
    tmp_path: Path,
) -> None:
    """Every answer to the paired client within 1 s; the log grows by at most 4 kB.

    This process's soft open-file limit is raised to the hard one; if that is below what
    2,000 connections need, the neighbour holds as many as it allows (printed).
    """
    count = raise_open_file_limit()
    if count < 2_000:
        print(f"the hard open-file limit allows the neighbour only {count} connections")
    data = tmp_path / "rig"
    daemon = Taprigd(data, f"service.header_timeout_s={HEADER_S}").start().wait_ready()
    client = PairedClient(daemon.port, daemon.token)
    neighbour = Neighbour(daemon.port, count)
    try:
        assert client.ask("/v1/state")[0] == 200
        before = _attack_log_bytes(daemon.log())
        end = time.monotonic() + 3 * HEADER_S + 2  # deadlines pass and connections turn over
        while time.monotonic() < end:
            neighbour.top_up(at_most=250)
            for path in ("/v1/state", "/v1/tests", "/v1/changes?since=0", "/v1/info"):
                status, _ = client.ask(path)
                assert status == 200, path
        assert neighbour.opened >= count, neighbour.opened
        assert neighbour.closed_by_rig > count // 2  # refused or timed out, not all held
        fresh = raw_get(daemon.port, "127.0.0.2", "/v1/health")  # a new connection as well
        assert fresh[0] == 200, fresh
        worst = max(client.latencies)
        assert worst < ANSWER_GOAL_S, f"slowest answer {worst:.3f} s of {len(client.latencies)}"
        log = daemon.log()
        grown = _attack_log_bytes(log) - before
        assert grown <= LOG_CEILING_BYTES, log[-4000:]
        assert "Traceback" not in log and "Too many open files" not in log, log[-4000:]
        assert "refused: its share of 32 is in use" in log
    finally:
        neighbour.close()
        client.close()
        assert daemon.stop() == 0


def _rig(tmp_path: Path, header_s: float) -> Taprigd:
    """A rig with a small cap (8), a share of 6 per address, the given header deadline and
    a 2 s body deadline."""
    return Taprigd(tmp_path / "rig", "service.max_connections=8",
                   "service.connections_per_address=6", f"service.header_timeout_s={header_s}",
                   f"service.body_timeout_s={HEADER_S}").start().wait_ready()  # fmt: skip


@pytest.fixture
def quick_rig(tmp_path: Path) -> Iterator[Taprigd]:
    """Deadlines of 2 s, to see them pass."""
    daemon = _rig(tmp_path, HEADER_S)
    yield daemon
    assert daemon.stop() == 0


@pytest.fixture
def patient_rig(tmp_path: Path) -> Iterator[Taprigd]:
    """A 60 s header deadline: held connections stay until the test lets them go."""
    daemon = _rig(tmp_path, 60.0)
    yield daemon
    assert daemon.stop() == 0


def _hold(port: int, source: str, n: int) -> list[socket.socket]:
    """`n` connections from `source` that send half a request line and wait."""
    return [slow_connection(port, source, b"GET /v1/info HT") for _ in range(n)]


def test_slow_headers_are_cut_off_at_the_deadline(quick_rig: Taprigd) -> None:
    """Headers sent one line every 0.2 s never finish: the rig closes after about 2 s."""
    s = slow_connection(quick_rig.port, "127.0.0.1", b"GET /v1/info HTTP/1.1\r\n")
    t0 = time.monotonic()
    closed, got = closed_within(s, 20.0, dribble=b"X-Slow: 1\r\n")
    took = time.monotonic() - t0
    s.close()
    assert closed and got.startswith(b"HTTP/1.1 408 "), got
    assert HEADER_S - 0.2 <= took < HEADER_S + 10, took


def test_a_dribbled_body_is_answered_408(quick_rig: Taprigd) -> None:
    """A body promised as 200 bytes of which 10 come: 408 once the body deadline passes."""
    head = (f"POST /v1/tests HTTP/1.1\r\nHost: rig\r\nAuthorization: Bearer {quick_rig.token}"
            "\r\nContent-Type: application/json\r\nContent-Length: 200\r\n\r\n"
            '{"name": ')  # fmt: skip
    s = slow_connection(quick_rig.port, "127.0.0.1", head.encode())
    _, got = closed_within(s, 20.0)
    s.close()
    assert got.startswith(b"HTTP/1.1 408 "), got[:200]
    assert b"request_timeout" in got


def test_a_second_address_is_served_while_one_holds_its_share(patient_rig: Taprigd) -> None:
    """127.0.0.1 holds its 6; its 7th is refused 503, while 127.0.0.2 gets its answer."""
    port = patient_rig.port
    held = _hold(port, "127.0.0.1", 6)
    try:
        status, body = raw_get(port, "127.0.0.1", "/v1/info")
        assert status == 503 and b"too_many_connections" in body, (status, body)
        status, body = raw_get(port, "127.0.0.2", "/v1/info")
        assert status == 200, (status, body)
        assert not any(closed_within(s, 0.05)[0] for s in held)  # all still held
    finally:
        for s in held:
            s.close()


def test_a_newcomer_takes_an_idle_place_when_the_cap_is_full(patient_rig: Taprigd) -> None:
    """6 from 127.0.0.1 and 2 from 127.0.0.3 fill the cap of 8; 127.0.0.2 is still served,
    in the place of 127.0.0.1's oldest connection, which is closed."""
    port = patient_rig.port
    first = _hold(port, "127.0.0.1", 6)
    others = _hold(port, "127.0.0.3", 2)
    try:
        # 127.0.0.1's next one is refused for its share: the gate has seen all 6 of them.
        wait_until("127.0.0.1 refused", lambda: raw_get(port, "127.0.0.1", "/v1/info")[0] == 503,
                   10.0)  # fmt: skip
        status, body = raw_get(port, "127.0.0.2", "/v1/info")
        assert status == 200, (status, body)
        assert closed_within(first[0], 10.0)[0], "the oldest idle connection stays open"
        assert not any(closed_within(s, 0.05)[0] for s in first[1:] + others)
    finally:
        for s in first + others:
            s.close()
