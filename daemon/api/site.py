"""Where the service listens: a listening socket whose connections pass the gate (gate.py),
the connection cap checked against the open-file limit, and quiet handling of an accept that
runs out of file descriptors.

Open files: each connection is one descriptor; the process also needs some for the store, the
device, mDNS and the worker threads' store readers (`FD_RESERVE`). At start the soft
RLIMIT_NOFILE is raised towards the hard one if the cap needs it; if the hard limit is still
too low the cap is lowered to fit, and one log line says so (deploy/taprigd.service sets
``LimitNOFILE``).

Out of descriptors at accept (EMFILE, ENFILE): asyncio already stops accepting for a second
and tries again, but reports each time through the loop's exception handler with a traceback.
`quiet_accept_errors` puts one plain log line there instead (and the log's repeat filter,
daemon/logrepeat.py, folds the repeats).
"""

from __future__ import annotations

import asyncio
import errno
import logging
import resource
from collections.abc import Callable
from typing import Any, Final

from aiohttp import web

from .gate import Gate, Limits

log = logging.getLogger(__name__)

FD_RESERVE: Final = 128  # descriptors kept for everything but client connections
BACKLOG: Final = 1024  # pending connections the kernel queues (capped by net.core.somaxconn)
_OUT_OF_FILES: Final = (errno.EMFILE, errno.ENFILE, errno.ENOBUFS, errno.ENOMEM)


def fit_to_open_files(limits: Limits) -> Limits:
    """`limits` with a total that the process's open-file limit can carry.

    Raises the soft RLIMIT_NOFILE up to the hard limit when that is what it takes; logs the
    outcome once. Returns `limits` unchanged when they fit.
    """
    soft, hard = resource.getrlimit(resource.RLIMIT_NOFILE)
    need = limits.total + FD_RESERVE
    if soft != resource.RLIM_INFINITY and soft < need:
        target = need if hard == resource.RLIM_INFINITY else min(need, hard)
        try:
            resource.setrlimit(resource.RLIMIT_NOFILE, (target, hard))
            soft = target
        except (ValueError, OSError) as exc:
            log.warning("cannot raise the open-file limit from %d to %d: %s", soft, target, exc)
    if soft == resource.RLIM_INFINITY or soft >= need:
        log.info("connections: at most %d, %d per address; open-file limit %s",
                 limits.total, limits.per_address,
                 "unlimited" if soft == resource.RLIM_INFINITY else soft)  # fmt: skip
        return limits
    total = max(1, soft - FD_RESERVE)
    per_address = min(limits.per_address, total)
    log.warning("the open-file limit (%d) allows %d connections, not the %d configured; "
                "raise LimitNOFILE in the service unit to at least %d",
                soft, total, limits.total, need)  # fmt: skip
    return Limits(total=total, per_address=per_address, header_s=limits.header_s)


class GatedSite(web.BaseSite):
    """A TCP site of an aiohttp runner whose connections go through `gate`."""

    __slots__ = ("_gate", "_host", "_port")

    def __init__(self, runner: web.BaseRunner, gate: Gate, host: str, port: int) -> None:
        super().__init__(runner, backlog=BACKLOG)
        self._host, self._port, self._gate = host, port, gate

    @property
    def name(self) -> str:
        return f"http://{self._host}:{self._port}"

    async def start(self) -> None:
        await super().start()
        server = self._runner.server
        assert server is not None
        loop = asyncio.get_running_loop()
        self._server = await loop.create_server(
            lambda: self._gate.guard(server), self._host, self._port, backlog=self._backlog,
            reuse_address=True,
        )  # fmt: skip


def quiet_accept_errors(loop: asyncio.AbstractEventLoop) -> Callable[[], None]:
    """Log running out of descriptors at accept as one plain line; returns the undo."""
    previous = loop.get_exception_handler()

    def handle(loop: asyncio.AbstractEventLoop, context: dict[str, Any]) -> None:
        exc = context.get("exception")
        if (
            isinstance(exc, OSError)
            and exc.errno in _OUT_OF_FILES
            and "accept" in str(context.get("message", ""))
        ):
            name = errno.errorcode.get(exc.errno or 0, str(exc.errno))
            log.error("out of file descriptors accepting a connection (%s); accepting "
                      "pauses for a second", name)  # fmt: skip
            return
        if previous is not None:
            previous(loop, context)
        else:
            loop.default_exception_handler(context)

    loop.set_exception_handler(handle)
    return lambda: loop.set_exception_handler(previous)
