"""Rig events on the event loop: fanned out to server-sent event streams and long-polls.

Rig events arrive on the rig's processing thread (`from_rig`) and are handed to the loop
with ``loop.call_soon_threadsafe``; there each becomes one SSE frame queued to every open
stream, and a completed point set wakes the long-polls of /v1/changes.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
from collections.abc import Awaitable, Callable, Sequence
from typing import TYPE_CHECKING, Final, TypeVar

from aiohttp import web

from .bodies import dumps
from .routes import EVENT_STREAM

if TYPE_CHECKING:
    from ..rigstate import RigEvent

log = logging.getLogger(__name__)

STREAM_QUEUE: Final = 512  # events buffered per event-stream client before it is dropped
T = TypeVar("T")


class Feed:
    """Event streams and waiting long-polls of one service; `attach` it inside the loop."""

    def __init__(self, heartbeat_s: float) -> None:
        self.heartbeat_s = heartbeat_s
        self.polls_waiting = 0
        """Long-polls of /v1/changes waiting for a change right now."""
        self.closed = False
        self._loop: asyncio.AbstractEventLoop | None = None
        self._changed = asyncio.Event()
        self._streams: set[asyncio.Queue[bytes | None]] = set()

    def attach(self, loop: asyncio.AbstractEventLoop) -> None:
        self._loop = loop

    def close(self) -> None:
        """End every stream and answer every waiting poll (event loop). Safe to call twice."""
        self.closed = True
        for q in list(self._streams):
            self._drop(q)
        self.wake()

    def from_rig(self, event: RigEvent) -> None:
        """A rig observer: called on the rig's thread, hands the event to the loop."""
        loop = self._loop
        if loop is None or self.closed:
            return
        # The loop may close between the check and the call; nobody is listening then.
        with contextlib.suppress(RuntimeError):
            loop.call_soon_threadsafe(self._dispatch, event)

    def wake(self) -> None:
        """Wake every long-poll waiting for a change (event loop)."""
        self._changed.set()
        self._changed = asyncio.Event()

    async def poll(self, fetch: Callable[[], Awaitable[Sequence[T]]], wait_s: float) -> Sequence[T]:
        """`fetch()` until it returns something or `wait_s` seconds pass (or the feed closes)."""
        loop = asyncio.get_running_loop()
        deadline = loop.time() + wait_s
        while True:
            woken = self._changed  # taken before the query: a commit after it still wakes us
            found = await fetch()
            left = deadline - loop.time()
            if found or left <= 0 or self.closed:
                return found
            self.polls_waiting += 1
            try:
                with contextlib.suppress(TimeoutError):
                    await asyncio.wait_for(woken.wait(), left)
            finally:
                self.polls_waiting -= 1
            if self.closed:
                return found  # answer now, with nothing new, so that the close need not wait

    async def stream(self, request: web.Request) -> web.StreamResponse:
        """Serve one client's event stream until it leaves or the feed closes."""
        q: asyncio.Queue[bytes | None] = asyncio.Queue(STREAM_QUEUE)
        # Subscribed before the headers go out: once a client has the response, it misses
        # no event.
        self._streams.add(q)
        resp = web.StreamResponse(headers={"Cache-Control": "no-cache"})
        resp.content_type = EVENT_STREAM
        try:
            await resp.prepare(request)
            await resp.write(b"retry: 2000\n\n")  # reconnection delay, ms (HTML §9.2)
            while not self.closed:
                try:
                    frame = await asyncio.wait_for(q.get(), self.heartbeat_s)
                except TimeoutError:
                    frame = b": heartbeat\n\n"
                if frame is None:
                    break
                await resp.write(frame)
        except ConnectionError:
            pass  # the client left
        finally:
            self._streams.discard(q)
        return resp

    def _dispatch(self, event: RigEvent) -> None:
        try:
            frame = f"event: {event.kind}\ndata: {dumps(event.data)}\n\n".encode()
        except (TypeError, ValueError):
            log.exception("rig event %s is not JSON; not sent", event.kind)
            return
        for q in list(self._streams):
            try:
                q.put_nowait(frame)
            except asyncio.QueueFull:
                # A reader too slow to keep up is cut off; it reconnects and reads /v1/state.
                self._drop(q)
        if event.kind == "completed":
            self.wake()

    def _drop(self, q: asyncio.Queue[bytes | None]) -> None:
        self._streams.discard(q)
        while not q.empty():
            q.get_nowait()
        q.put_nowait(None)
