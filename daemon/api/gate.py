"""The service's door: which connections get in, and how long one may dawdle over its headers.

aiohttp answers every connection it is handed and waits as long as a client likes for a
request's headers, so a neighbour holding many silent or slow connections could take every
socket the process may open. The gate sits between the listening socket and aiohttp: each
accepted connection gets a `Guard` (an asyncio protocol wrapping aiohttp's own) that asks the
`Gate` for a place first.

- **A cap on connections** (`Limits.total`), below the process's open-file limit
  (daemon/api/site.py checks it at start).
- **A fair share per address** (`Limits.per_address`): one address holds at most that many
  connections; one more from it is answered 503 and closed. When the whole cap is in use, a
  newcomer from an address holding fewer connections takes the place of the oldest idle
  connection of the address holding the most, so another workstation or the phone is
  served however one neighbour behaves.
- **A header deadline** (`Limits.header_s`): a connection must complete its request's headers
  within that time of opening, or of its first byte after an answer; else it is closed.
  While a request is handled (the service's middleware marks it) no deadline runs: long-polls
  and event streams last as long as they need. The body has its own deadline, in
  daemon/api/validate.py. An idle kept-alive connection is closed by aiohttp's keep-alive
  timeout.

Everything here runs on the event loop; nothing blocks.
"""

from __future__ import annotations

import asyncio
import logging
from collections.abc import Callable
from dataclasses import dataclass
from typing import Final

log = logging.getLogger(__name__)


# The answer to a connection refused at the door: the client learns why, then the socket closes.
def _closing_answer(status: str, code: str, message: str, extra: str = "") -> bytes:
    body = b'{"error":"%s","message":"%s"}\n' % (code.encode(), message.encode())
    head = (f"HTTP/1.1 {status}\r\nConnection: close\r\n{extra}Content-Type: application/json"
            f"\r\nContent-Length: {len(body)}\r\n\r\n")  # fmt: skip
    return head.encode() + body


REFUSAL: Final = _closing_answer(
    "503 Service Unavailable",
    "too_many_connections",
    "too many connections; retry later",
    "Retry-After: 5\r\n",
)
# The answer to headers that did not come in time (RFC 9110 §15.5.9: 408 then close).
TOO_SLOW: Final = _closing_answer(
    "408 Request Timeout", "request_timeout", "the request headers did not arrive in time"
)


@dataclass(frozen=True, slots=True)
class Limits:
    """How many connections, how many per client address, and the header deadline (s)."""

    total: int = 512
    per_address: int = 32
    header_s: float = 10.0


@dataclass(slots=True)
class GateStats:
    """Counters since start: connections let in, refused, evicted and timed out."""

    admitted: int = 0
    refused: int = 0
    evicted: int = 0
    timed_out: int = 0


class Gate:
    """Admission of connections by address; see the module docstring. Event loop only."""

    def __init__(self, limits: Limits) -> None:
        self.limits = limits
        self.stats = GateStats()
        # Per address, its guards oldest first (a dict keeps insertion order).
        self._by_address: dict[str, dict[Guard, None]] = {}
        self._by_inner: dict[object, Guard] = {}
        self._count = 0

    @property
    def open(self) -> int:
        """Connections inside the gate right now."""
        return self._count

    def guard(self, make_inner: Callable[[], asyncio.Protocol]) -> Guard:
        """A protocol for one accepted connection, around aiohttp's (made by `make_inner`)."""
        return Guard(self, make_inner)

    def has_room(self, address: str) -> bool:
        """Whether a connection from `address` would be let in now (`admit` decides)."""
        if len(self._by_address.get(address, ())) >= self.limits.per_address:
            return False
        return self._count < self.limits.total or self._victim(
            len(self._by_address.get(address, ()))) is not None  # fmt: skip

    def refuse(self, address: str) -> None:
        """A connection from `address` was turned away before it had a guard."""
        self.stats.refused += 1
        log.warning("connection from %s refused: %s", address, self._why(address))

    def _why(self, address: str) -> str:
        if len(self._by_address.get(address, ())) >= self.limits.per_address:
            return f"its share of {self.limits.per_address} is in use"
        return f"all {self.limits.total} connections are in use"

    def admit(self, guard: Guard) -> bool:
        """Let `guard` in, evicting for fairness if the cap is reached; False: refused."""
        if not self.has_room(guard.address):
            self.refuse(guard.address)
            return False
        mine = self._by_address.setdefault(guard.address, {})
        if self._count >= self.limits.total:
            victim = self._victim(len(mine))
            assert victim is not None  # has_room found one
            self.stats.evicted += 1
            log.warning("connection from %s closed to make room for one from %s",
                        victim.address, guard.address)  # fmt: skip
            self._forget(victim)
            victim.close()
        mine[guard] = None
        self._count += 1
        self.stats.admitted += 1
        return True

    def _victim(self, newcomer_holds: int) -> Guard | None:
        """The oldest idle connection of the address holding the most, if it holds more
        than the newcomer's address would after admission; else None."""
        if not self._by_address:
            return None
        _, guards = max(self._by_address.items(), key=lambda item: len(item[1]))
        if len(guards) <= newcomer_holds + 1:
            return None
        return next((g for g in guards if not g.busy), None)

    def entered(self, guard: Guard, inner: object) -> None:
        """`guard`'s aiohttp protocol is `inner` (for `request_started`)."""
        self._by_inner[inner] = guard

    def leave(self, guard: Guard) -> None:
        """`guard`'s connection is gone (an evicted one was forgotten already)."""
        self._forget(guard)

    def _forget(self, guard: Guard) -> None:
        mine = self._by_address.get(guard.address, {})
        if guard in mine:
            del mine[guard]
            self._count -= 1
        if not mine:
            self._by_address.pop(guard.address, None)
        if guard.inner is not None:
            self._by_inner.pop(guard.inner, None)

    def request_started(self, inner: object) -> None:
        """A request on the connection of aiohttp protocol `inner` reached the service."""
        guard = self._by_inner.get(inner)
        if guard is not None:
            guard.started()

    def request_finished(self, inner: object) -> None:
        """That request has been answered (or failed)."""
        guard = self._by_inner.get(inner)
        if guard is not None:
            guard.finished()

    def timed_out(self, guard: Guard) -> None:
        self.stats.timed_out += 1
        log.info("connection from %s closed: no complete request headers in %g s",
                 guard.address, self.limits.header_s)  # fmt: skip


class Guard(asyncio.Protocol):
    """One connection's protocol: admission, the header deadline, then aiohttp's protocol.

    Every protocol callback is passed on to aiohttp's protocol once the gate let it in.
    """

    def __init__(self, gate: Gate, make_inner: Callable[[], asyncio.Protocol]) -> None:
        self._gate, self._make_inner = gate, make_inner
        self.inner: asyncio.Protocol | None = None
        self.address = ""
        self.busy = 0  # requests being handled on this connection
        self._transport: asyncio.Transport | None = None
        self._deadline: asyncio.TimerHandle | None = None

    def connection_made(self, transport: asyncio.BaseTransport) -> None:
        assert isinstance(transport, asyncio.Transport)
        self._transport = transport
        peer = transport.get_extra_info("peername")
        self.address = str(peer[0]) if isinstance(peer, tuple) and peer else "?"
        if not self._gate.admit(self):
            transport.write(REFUSAL)
            transport.close()
            return
        self.inner = self._make_inner()
        self._gate.entered(self, self.inner)
        self._arm()
        self.inner.connection_made(transport)

    def connection_lost(self, exc: Exception | None) -> None:
        self._disarm()
        if self.inner is None:
            return
        self._gate.leave(self)
        self.inner.connection_lost(exc)

    def data_received(self, data: bytes) -> None:
        if self.inner is None:
            return  # refused: whatever it sends is dropped
        if not self.busy and self._deadline is None:
            self._arm()  # the first byte of a new request: its headers must follow in time
        self.inner.data_received(data)

    def eof_received(self) -> bool | None:
        return self.inner.eof_received() if self.inner is not None else None

    def pause_writing(self) -> None:
        if self.inner is not None:
            self.inner.pause_writing()

    def resume_writing(self) -> None:
        if self.inner is not None:
            self.inner.resume_writing()

    # -- the header deadline

    def started(self) -> None:
        self.busy += 1
        self._disarm()

    def finished(self) -> None:
        self.busy = max(0, self.busy - 1)

    def close(self) -> None:
        """Close the connection now (eviction)."""
        self._disarm()
        if self._transport is not None:
            self._transport.abort()

    def _arm(self) -> None:
        loop = asyncio.get_running_loop()
        self._deadline = loop.call_later(self._gate.limits.header_s, self._expire)

    def _disarm(self) -> None:
        if self._deadline is not None:
            self._deadline.cancel()
            self._deadline = None

    def _expire(self) -> None:
        self._deadline = None
        if self.busy or self._transport is None:
            return
        self._gate.timed_out(self)
        self._transport.write(TOO_SLOW)
        self._transport.close()
