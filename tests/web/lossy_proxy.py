"""A loopback HTTP/1.1 relay between the browser and taprigd that can lose the network.

It stands in for shop Wi-Fi: `cut()` drops every open connection (the event stream too) and
refuses new ones until `restore()`; `lose_answer(path)` lets the next POST to `path` reach the
rig, then drops the connection before the answer gets back (the rig has acted; the phone does
not know). Every request passes one at a time over a fresh upstream connection with
``Connection: close``, so a response ends where the rig closes it. Runs its own asyncio loop in
one thread; `close()` stops it and joins the thread.
"""

from __future__ import annotations

import asyncio
import contextlib
import threading
from collections.abc import Callable
from concurrent.futures import Future
from typing import Any

MAX_HEAD = 64 * 1024  # bytes of request line and headers


class LossyProxy:
    def __init__(self, upstream_port: int) -> None:
        self.upstream_port = upstream_port
        self.port = 0
        self.requests: list[tuple[str, bytes]] = []
        """(request line, body) of every request relayed, in arrival order."""
        self._loop = asyncio.new_event_loop()
        self._cut = False
        self._lose: dict[str, int] = {}
        self._writers: set[asyncio.StreamWriter] = set()
        self._upstreams: set[asyncio.StreamWriter] = set()
        self._tasks: set[asyncio.Task[None]] = set()
        self._server: asyncio.Server | None = None
        self._thread = threading.Thread(target=self._loop.run_forever, name="lossy-proxy")

    def start(self) -> LossyProxy:
        self._thread.start()
        self._server = self._call(lambda: asyncio.start_server(self._serve, "127.0.0.1", 0))
        self.port = int(self._server.sockets[0].getsockname()[1])
        return self

    def close(self) -> None:
        if not self._thread.is_alive():
            return

        async def stop() -> None:
            assert self._server is not None
            self._server.close()
            # Every connection dropped at both ends: each relay sees its reads end and returns.
            for w in [*self._writers, *self._upstreams]:
                w.transport.abort()
            await asyncio.wait_for(asyncio.gather(*self._tasks, return_exceptions=True), 5)

        self._call(stop)
        self._loop.call_soon_threadsafe(self._loop.stop)
        self._thread.join(timeout=10)
        self._loop.close()

    def cut(self) -> None:
        """The network goes: open connections drop, new ones are refused."""

        async def go() -> None:
            self._cut = True
            for w in list(self._writers):
                w.transport.abort()

        self._call(go)

    def restore(self) -> None:
        async def go() -> None:
            self._cut = False

        self._call(go)

    def lose_answer(self, path: str) -> None:
        """The next POST to `path` reaches the rig; its answer is dropped on the way back."""

        async def go() -> None:
            self._lose[path] = self._lose.get(path, 0) + 1

        self._call(go)

    def _call(self, make: Callable[[], Any]) -> Any:
        async def run() -> Any:
            return await make()

        fut: Future[Any] = asyncio.run_coroutine_threadsafe(run(), self._loop)
        return fut.result(timeout=10)

    async def _serve(self, reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        task = asyncio.current_task()
        assert task is not None
        self._tasks.add(task)
        self._writers.add(writer)
        try:
            if self._cut:
                return
            with contextlib.suppress(ConnectionError, asyncio.IncompleteReadError,
                                     asyncio.LimitOverrunError):  # fmt: skip
                await self._relay(reader, writer)
        finally:
            self._writers.discard(writer)
            self._tasks.discard(task)
            writer.transport.abort()

    async def _relay(self, reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        head = await reader.readuntil(b"\r\n\r\n")
        if len(head) > MAX_HEAD:
            return
        lines = head.decode("latin-1").split("\r\n")
        request_line = lines[0]
        headers = [h for h in lines[1:] if h and not h.lower().startswith("connection:")]
        length = next((int(h.split(":", 1)[1]) for h in headers
                       if h.lower().startswith("content-length:")), 0)  # fmt: skip
        body = await reader.readexactly(length) if length else b""
        self.requests.append((request_line, body))
        method, path = request_line.split(" ")[:2]
        up_reader, up_writer = await asyncio.open_connection("127.0.0.1", self.upstream_port)
        self._upstreams.add(up_writer)
        try:
            out = "\r\n".join([request_line, *headers, "Connection: close", "", ""])
            up_writer.write(out.encode("latin-1") + body)
            await up_writer.drain()
            if method == "POST" and self._lose.get(path, 0) > 0:
                self._lose[path] -= 1
                await up_reader.read()  # the rig answers in full; the phone never hears it
                return
            while chunk := await up_reader.read(65536):
                if self._cut:
                    return
                writer.write(chunk)
                await writer.drain()
        finally:
            self._upstreams.discard(up_writer)
            up_writer.transport.abort()
