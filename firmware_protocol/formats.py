"""Input formats by name: every decoder shares one small interface.

A decoder is fed byte chunks and returns events; it keeps running counters in
`stats` and the last device description in `info`. To add a format, write a
module with a class meeting `Decoder` and register a factory here.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any, Protocol

from .binary import BinaryDecoder
from .events import Event, LinkStats
from .frames import DeviceInfo
from .text import TextDecoder


class Decoder(Protocol):
    """What the daemon needs of an input format."""

    name: str
    stats: LinkStats

    @property
    def info(self) -> DeviceInfo | None: ...

    def feed(self, chunk: bytes | bytearray | memoryview) -> list[Event]: ...

    def reset_link(self) -> None: ...


DECODERS: dict[str, Callable[..., Decoder]] = {
    "binary": BinaryDecoder,
    "text": TextDecoder,
}


def make_decoder(name: str, **options: Any) -> Decoder:
    """A new decoder for the format `name`; options go to its constructor."""
    try:
        factory = DECODERS[name]
    except KeyError:
        allowed = ", ".join(sorted(DECODERS))
        raise ValueError(f"input format {name!r} is unknown; allowed: {allowed}") from None
    return factory(**options)
