"""A rig's event stream (`GET /v1/events`, server-sent events) read on a thread of its own.

`EventFeed` opens the stream, parses its frames (HTML Living Standard, "Server-sent events",
§9.2.6: `event:` and `data:` lines, a blank line ends a frame, lines starting with a colon
are comments such as the rig's heartbeat) and queues each event as (kind, data). Whoever
waits for one (`next`) hears of it as soon as the rig sends it, without asking again and
again: the demo's operator waits here for the verdict of each tap, as the phone page does.
"""

from __future__ import annotations

import contextlib
import http.client
import json
import queue
import socket
import threading
import time
import urllib.parse
from typing import Any, Final

from .errors import ClientError
from .remote import USER_AGENT, RigError, RigUnreachable, base_url

# The rig sends a heartbeat every 1.5 s (daemon/api/routes.py HEARTBEAT_S); this much
# silence means the stream is dead, s.
SILENCE_S: Final = 10.0
Event = tuple[str, dict[str, Any]]


class EventFeed:
    """The rig's events as they come. url: ``http://host:port``; token: the rig's token.

    Raises RigUnreachable when the rig cannot be reached, RigError when it refuses the
    stream. `close` is idempotent; use it as a context manager.
    """

    def __init__(self, url: str, token: str | None) -> None:
        parts = urllib.parse.urlsplit(base_url(url))
        self._conn = http.client.HTTPConnection(parts.hostname or "", parts.port, timeout=SILENCE_S)
        headers = {"Accept": "text/event-stream", "User-Agent": USER_AGENT}
        if token:
            headers["Authorization"] = f"Bearer {token}"
        try:
            self._conn.request("GET", "/v1/events", headers=headers)
            resp = self._conn.getresponse()
        except (OSError, http.client.HTTPException) as exc:
            self._conn.close()
            raise RigUnreachable(f"no event stream from {url}: {exc}") from None
        if resp.status != 200:
            body = resp.read(4096)
            self._conn.close()
            raise RigError(resp.status, "events", body.decode("utf-8", "replace"))
        self._queue: queue.Queue[Event | None] = queue.Queue()
        self._closed = False
        self._thread = threading.Thread(target=self._read, args=(resp,), name="taprig-events",
                                        daemon=True)  # fmt: skip
        self._thread.start()

    def __enter__(self) -> EventFeed:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def close(self) -> None:
        """Stop reading (the reader thread ends at once) and drop the connection."""
        if self._closed:
            return
        self._closed = True
        sock = self._conn.sock
        if sock is not None:
            with contextlib.suppress(OSError):  # already gone
                sock.shutdown(socket.SHUT_RDWR)  # wakes the reader out of its recv
        self._thread.join(timeout=5.0)
        self._conn.close()

    def drain(self) -> None:
        """Forget the events already queued."""
        while True:
            try:
                if self._queue.get_nowait() is None:
                    self._queue.put(None)  # the end stays for whoever waits next
                    return
            except queue.Empty:
                return

    def next(self, kind: str, timeout_s: float) -> dict[str, Any] | None:
        """The data of the next event of `kind` within `timeout_s` (others are passed over);
        None when none came. ClientError once the stream has ended."""
        deadline = time.monotonic() + timeout_s
        while (left := deadline - time.monotonic()) > 0:
            try:
                item = self._queue.get(timeout=left)
            except queue.Empty:
                return None
            if item is None:
                self._queue.put(None)
                raise ClientError("the rig's event stream ended")
            if item[0] == kind:
                return item[1]
        return None

    def _read(self, resp: http.client.HTTPResponse) -> None:
        kind, data = "message", list[str]()
        try:
            while line := resp.readline():
                text = line.decode("utf-8", "replace").rstrip("\r\n")
                if not text:  # the frame is complete
                    if data:
                        self._put(kind, "\n".join(data))
                    kind, data = "message", []
                elif not text.startswith(":"):
                    name, _, value = text.partition(":")
                    value = value.removeprefix(" ")
                    if name == "event":
                        kind = value
                    elif name == "data":
                        data.append(value)
        except (OSError, ValueError, http.client.HTTPException):
            pass  # closed, reset or silent too long: the waiting side hears of the end
        finally:
            self._queue.put(None)

    def _put(self, kind: str, payload: str) -> None:
        try:
            obj = json.loads(payload)
        except ValueError:
            return  # not JSON: not one of the rig's events
        if isinstance(obj, dict):
            self._queue.put((kind, obj))
