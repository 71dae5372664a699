"""The mistakes of one reading of the configuration, kept and reported together.

A user with three typos fixes three, not one, then another, then another: every check
that can run does, and `raise_any` reports all it found, one numbered line each.
"""

from __future__ import annotations

import contextlib
from collections.abc import Iterator

from ..errors import ConfigError
from .channels import ConfigErrors


class Problems:
    """The mistakes found while reading a configuration, reported together at the end."""

    def __init__(self) -> None:
        self.found: list[str] = []

    def add(self, message: str) -> None:
        self.found.append(message)

    @contextlib.contextmanager
    def collect(self) -> Iterator[None]:
        """Run the block; a ConfigError it raises is kept, and reading goes on."""
        try:
            yield
        except ConfigErrors as exc:
            self.found.extend(exc.messages)
        except ConfigError as exc:
            self.found.append(str(exc))

    def raise_any(self) -> None:
        """ConfigError with every mistake found (one line each), if there were any."""
        if len(self.found) == 1:
            raise ConfigError(self.found[0])
        if self.found:
            listed = "\n".join(f"  {i}. {m}" for i, m in enumerate(self.found, 1))
            raise ConfigError(f"{len(self.found)} mistakes in the configuration:\n{listed}")
