"""Control requests act once: a retry with the same ``request_id`` gets the first answer.

The outcome of each request id is remembered (bounded, least recently used first out); a
retry awaits the same outcome without acting again, and the same id sent with another body
is refused (422).
"""

from __future__ import annotations

import asyncio
import collections
import json
from collections.abc import Awaitable, Callable
from dataclasses import dataclass
from typing import Final

from .errors import ApiError, Outcome, error_of
from .routes import Payload

REMEMBERED: Final = 1024  # control outcomes kept for retries


@dataclass(slots=True)
class _Remembered:
    fingerprint: str
    outcome: asyncio.Future[Outcome]


class Once:
    """Outcomes of control requests by request id; use from the event loop only."""

    def __init__(self, size: int = REMEMBERED) -> None:
        self.size = size
        self._memory: collections.OrderedDict[str, _Remembered] = collections.OrderedDict()

    async def run(self, what: str, body: Payload, act: Callable[[], Awaitable[Outcome]]) -> Outcome:
        """Run `act` once per request_id; a retry awaits and returns the first outcome."""
        rid = body.get("request_id")
        if rid is None:
            return await settle(act)
        fingerprint = json.dumps([what, body], sort_keys=True)
        entry = self._memory.get(rid)
        if entry is None:
            entry = _Remembered(fingerprint, asyncio.ensure_future(settle(act)))
            self._memory[rid] = entry
            while len(self._memory) > self.size:
                self._memory.popitem(last=False)
        elif entry.fingerprint != fingerprint:
            raise ApiError(422, "request_id_reused",
                           f"request_id {rid!r} was used for a different request")  # fmt: skip
        else:
            self._memory.move_to_end(rid)
        return await asyncio.shield(entry.outcome)


async def settle(act: Callable[[], Awaitable[Outcome]]) -> Outcome:
    """The outcome of `act`, an error mapped to its status like any other."""
    try:
        return await act()
    except Exception as exc:
        return error_of(exc)
