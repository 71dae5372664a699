"""The page of `taprig view`, served on loopback by aiohttp.

Routes: ``/`` the page; ``/web/<file>`` its scripts and style (only the files in `FILES`,
read once at start-up); ``/data`` the opening JSON (payload.page_data, encoded once);
``/data/point/<row>`` one point's FRFs; ``/data/ods/<line>`` the operating deflection
shape at one frequency line. A Content Security Policy lets the page load and connect to
nothing but this server, so it works offline and nothing leaves the machine.

`ViewServer` holds the app; `run_view` serves until interrupted (the command line);
`ViewThread` serves from a thread of its own (tests, benchmarks, a notebook).
"""

from __future__ import annotations

import asyncio
import json
import threading
from collections.abc import Awaitable, Callable
from importlib import resources
from typing import Final

from aiohttp import web

from ..dataset import TestData
from .geometry import Geometry
from .modes import ModeSet
from .payload import deflection, page_data, point_frf

__all__ = ["FILES", "ViewServer", "ViewThread", "run_view"]

FILES: Final[dict[str, str]] = {
    "index.html": "text/html; charset=utf-8",
    "view.css": "text/css; charset=utf-8",
    "view.js": "text/javascript; charset=utf-8",
    "charts.js": "text/javascript; charset=utf-8",
    "shape.js": "text/javascript; charset=utf-8",
    "palette.js": "text/javascript; charset=utf-8",
}
POLICY: Final = (
    "default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self' data:; "
    "connect-src 'self'; base-uri 'none'; form-action 'none'; frame-ancestors 'none'"
)
HEADERS: Final = {"Content-Security-Policy": POLICY, "X-Content-Type-Options": "nosniff",
                  "Referrer-Policy": "no-referrer", "Cache-Control": "no-cache"}  # fmt: skip
JSON: Final = "application/json"


def _files() -> dict[str, bytes]:
    folder = resources.files("taprig.client.view").joinpath("web")
    return {name: folder.joinpath(name).read_bytes() for name in FILES}


class ViewServer:
    """The page's aiohttp application over one test's data, modes and geometry."""

    def __init__(self, data: TestData, modes: ModeSet, geometry: Geometry) -> None:
        self.data, self.geometry = data, geometry
        self.files = _files()
        self.opening = json.dumps(page_data(data, modes, geometry), separators=(",", ":"))
        self.runner: web.AppRunner | None = None
        self.port = 0

    def app(self) -> web.Application:
        app = web.Application()
        app.router.add_get("/", self._page)
        app.router.add_get("/web/{name}", self._static)
        app.router.add_get("/data", self._opening)
        app.router.add_get("/data/point/{row}", self._piece(point_frf))
        app.router.add_get("/data/ods/{line}", self._piece(self._ods))
        return app

    async def async_start(self, host: str = "127.0.0.1", port: int = 0) -> str:
        """Listen on `host`:`port` (0: any free port); the page's address."""
        self.runner = web.AppRunner(self.app(), access_log=None)
        await self.runner.setup()
        site = web.TCPSite(self.runner, host, port)
        await site.start()
        self.port = site._server.sockets[0].getsockname()[1]  # type: ignore[union-attr]
        return f"http://{host}:{self.port}/"

    async def async_close(self) -> None:
        if self.runner is not None:
            await self.runner.cleanup()
            self.runner = None

    def _ods(self, data: TestData, line: int) -> dict[str, object]:
        return deflection(data, self.geometry, line)

    async def _page(self, request: web.Request) -> web.Response:
        return self._file("index.html")

    async def _static(self, request: web.Request) -> web.Response:
        name = request.match_info["name"]
        if name not in FILES or name == "index.html":
            raise web.HTTPNotFound(text=f"no file {name}")
        return self._file(name)

    def _file(self, name: str) -> web.Response:
        return web.Response(body=self.files[name], content_type=FILES[name].split(";")[0],
                            charset="utf-8", headers=HEADERS)  # fmt: skip

    async def _opening(self, request: web.Request) -> web.Response:
        return web.Response(text=self.opening, content_type=JSON, headers=HEADERS)

    def _piece(
        self, build: Callable[[TestData, int], dict[str, object]]
    ) -> Callable[[web.Request], Awaitable[web.StreamResponse]]:
        """A handler answering build(data, int(last path part)); 404 for a bad number."""

        async def handler(request: web.Request) -> web.StreamResponse:
            text = next(iter(request.match_info.values()))
            try:
                body = build(self.data, int(text))
            except (ValueError, IndexError) as exc:
                raise web.HTTPNotFound(text=str(exc)) from None
            return web.Response(text=json.dumps(body, separators=(",", ":")),
                                content_type=JSON, headers=HEADERS)  # fmt: skip

        return handler


def run_view(server: ViewServer, port: int, opened: Callable[[str], None]) -> None:
    """Serve on 127.0.0.1:`port` until Ctrl-C or SIGTERM; `opened(url)` once listening."""
    import signal

    async def main() -> None:
        stop = asyncio.Event()
        loop = asyncio.get_running_loop()
        for sig in (signal.SIGINT, signal.SIGTERM):
            loop.add_signal_handler(sig, stop.set)
        opened(await server.async_start(port=port))
        try:
            await stop.wait()
        finally:
            await server.async_close()

    asyncio.run(main())


class ViewThread:
    """A ViewServer on an event loop in its own thread; `close()` stops both (idempotent)."""

    def __init__(self, server: ViewServer, port: int = 0) -> None:
        self.server = server
        self.loop = asyncio.new_event_loop()
        self.thread = threading.Thread(target=self.loop.run_forever, name="view-loop")
        self.thread.start()
        try:
            start = server.async_start(port=port)
            self.url = asyncio.run_coroutine_threadsafe(start, self.loop).result(30)
        except BaseException:
            self.close()
            raise

    def close(self) -> None:
        if self.thread.is_alive():
            done = asyncio.run_coroutine_threadsafe(self.server.async_close(), self.loop)
            done.result(30)
            self.loop.call_soon_threadsafe(self.loop.stop)
            self.thread.join(30)
            self.loop.close()

    def __enter__(self) -> ViewThread:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
