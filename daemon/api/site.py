"""Where the service listens: a listening socket whose connections pass the gate (gate.py),
the connection cap checked against the open-file limit, and quiet handling of an accept that
runs out of file descriptors.

Open files: each connection is one descriptor; the process also needs some for the store, the
device, mDNS and the worker threads' store readers (`FD_RESERVE`). At start the soft
RLIMIT_NOFILE is raised towards the hard one if the cap needs it; if the hard limit is still
too low the cap is lowered to fit, and one log line says so (deploy/taprigd.service sets
``LimitNOFILE``).

The listening socket is accepted from here, not by asyncio: a connection refused at the door
(gate.py) is answered and closed at once, before any asyncio transport exists, so a flood of
connections costs little; and running out of descriptors at accept (EMFILE, ENFILE) pauses
accepting briefly with one plain log line (the log's repeat filter, daemon/logrepeat.py,
folds repeats), not a traceback each time.
"""

from __future__ import annotations

import asyncio
import contextlib
import errno
import logging
import resource
import socket
from collections.abc import Callable
from typing import Any, Final

from aiohttp import web

from .gate import REFUSAL, Gate, Limits

log = logging.getLogger(__name__)

FD_RESERVE: Final = 128  # descriptors kept for everything but client connections
BACKLOG: Final = 1024  # pending connections the kernel queues (capped by net.core.somaxconn)
ACCEPTS_PER_TURN: Final = 32  # connections taken per turn of the event loop
PAUSE_S: Final = 0.5  # accepting stops this long when out of descriptors, seconds
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
    """A TCP site of an aiohttp runner whose connections go through `gate` (see `Listener`)."""

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
        sock = socket.create_server((self._host, self._port), backlog=self._backlog,
                                    family=_family(self._host), reuse_port=False)  # fmt: skip
        self._server = Listener(sock, lambda: self._gate.guard(server), self._gate)


def _family(host: str) -> socket.AddressFamily:
    return socket.AF_INET6 if ":" in host else socket.AF_INET


class Listener(asyncio.AbstractServer):
    """Accepts connections itself, so that one refused at the door costs an accept, a send
    and a close, not an asyncio transport and task; at most `ACCEPTS_PER_TURN` per turn of
    the loop, so a flood of connections never keeps other callbacks waiting long. Out of
    descriptors (EMFILE, ENFILE) it stops accepting for `PAUSE_S` and logs one line."""

    def __init__(
        self, sock: socket.socket, factory: Callable[[], asyncio.Protocol], gate: Gate
    ) -> None:
        self._sock, self._factory, self._gate = sock, factory, gate
        self._loop = asyncio.get_running_loop()
        self._tasks: set[asyncio.Task[Any]] = set()
        self._serving = True
        sock.setblocking(False)
        self._loop.add_reader(sock.fileno(), self._accept)

    @property
    def sockets(self) -> tuple[socket.socket, ...]:
        return (self._sock,) if self._serving else ()

    def _accept(self) -> None:
        for _ in range(ACCEPTS_PER_TURN):
            try:
                conn, peer = self._sock.accept()
            except (BlockingIOError, InterruptedError, ConnectionAbortedError):
                return
            except OSError as exc:
                if exc.errno not in _OUT_OF_FILES:
                    raise
                self._pause(exc)
                return
            address = str(peer[0]) if isinstance(peer, tuple) and peer else "?"
            if not self._gate.has_room(address):
                self._gate.refuse(address)
                with contextlib.suppress(OSError):
                    conn.setblocking(False)
                    conn.send(REFUSAL)  # fits any socket buffer: all or nothing in practice
                conn.close()
                continue
            task = self._loop.create_task(self._loop.connect_accepted_socket(self._factory, conn))
            self._tasks.add(task)
            task.add_done_callback(self._done)

    def _done(self, task: asyncio.Task[Any]) -> None:
        self._tasks.discard(task)
        if not task.cancelled() and task.exception() is not None:
            log.warning("could not take a connection: %s", task.exception())

    def _pause(self, exc: OSError) -> None:
        name = errno.errorcode.get(exc.errno or 0, str(exc.errno))
        log.error("out of file descriptors accepting a connection (%s); accepting pauses "
                  "for %g s", name, PAUSE_S)  # fmt: skip
        self._loop.remove_reader(self._sock.fileno())
        self._loop.call_later(PAUSE_S, self._resume)

    def _resume(self) -> None:
        if self._serving:
            self._loop.add_reader(self._sock.fileno(), self._accept)

    # -- asyncio.AbstractServer

    def close(self) -> None:
        if not self._serving:
            return
        self._serving = False
        self._loop.remove_reader(self._sock.fileno())
        self._sock.close()

    def get_loop(self) -> asyncio.AbstractEventLoop:
        return self._loop

    def is_serving(self) -> bool:
        return self._serving

    async def start_serving(self) -> None:
        return None  # serving since it was made

    async def serve_forever(self) -> None:
        raise NotImplementedError("the runner owns this listener's life")

    async def wait_closed(self) -> None:
        if self._tasks:
            await asyncio.gather(*self._tasks, return_exceptions=True)
