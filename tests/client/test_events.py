"""`EventFeed`: the rig's server-sent events read on a thread, against the real service.

A real rig on the simulated test piece served on loopback (conftest `served`): a command's
`cursor` event and a tap's `hit` event arrive in the feed; events of other kinds are passed
over; a wait with nothing coming ends at its timeout; the end of the stream (the service
stopped) is a ClientError, not a hang; a wrong token is the rig's 401; `close` is idempotent
and ends the reader thread. Frame syntax: HTML Living Standard, "Server-sent events" §9.2.6.
"""

from __future__ import annotations

import threading
import time

import pytest

from taprig.client.errors import ClientError
from taprig.client.events import EventFeed
from taprig.client.remote import RigClient, RigError

from .conftest import ServedRig

GRID = [{"label": f"A{i}", "x": 0.05 * i, "y": 0.1, "z": 0.0} for i in (1, 2, 3)]  # the panel's


def _readers() -> list[threading.Thread]:
    return [t for t in threading.enumerate() if t.name == "taprig-events"]


def test_a_command_and_a_tap_arrive_as_events(served: ServedRig) -> None:
    with RigClient(served.url, served.token) as rig, EventFeed(served.url, served.token) as feed:
        rig.create_test("feed", GRID, averages=2, sensors={"acc1": {"at": "A2"}})
        deadline = time.monotonic() + 20.0
        while rig.state().get("device") is None:  # the device identifies itself first
            assert time.monotonic() < deadline, "the simulated piece never identified itself"
            time.sleep(0.05)
        rig.act("select", test="feed")
        rig.act("arm")
        cursor = feed.next("cursor", 10.0)
        assert cursor is not None and cursor["test"] == "feed"
        feed.drain()
        piece = served.running.instrument
        assert piece is not None
        started = time.monotonic()
        piece.tap("A1")
        hit = feed.next("hit", 10.0)  # the "cursor" and "message" events of it are passed over
        assert hit is not None, "no hit event within 10 s of the tap"
        assert hit["point"] == "A1" and hit["accepted"] and hit["averages"] == 1
        assert isinstance(hit["rejections"], list) and hit["peak_force_n"] > 0
        assert time.monotonic() - started < 10.0
        assert feed.next("hit", 0.2) is None  # one tap, one hit


def test_the_stream_ending_and_a_wrong_token(served: ServedRig) -> None:
    with pytest.raises(RigError) as refused:
        EventFeed(served.url, "x" * 43)
    assert refused.value.status == 401
    feed = EventFeed(served.url, served.token)
    assert len(_readers()) == 1
    served.service_stop()
    with pytest.raises(ClientError, match="event stream ended"):
        feed.next("hit", 15.0)
    with pytest.raises(ClientError, match="event stream ended"):  # and stays ended
        feed.next("cursor", 0.1)
    feed.close()
    feed.close()
    assert _readers() == []


def test_close_ends_the_reader_at_once(served: ServedRig) -> None:
    feed = EventFeed(served.url, served.token)
    started = time.monotonic()
    feed.close()
    assert time.monotonic() - started < 2.0 and _readers() == []
