"""Counts in words: "1 test", "2 tests", "1 point set". One rule for every message."""

from __future__ import annotations


def count(n: int, singular: str, plural: str | None = None) -> str:
    """`n` and the noun, singular for exactly one ("1 test"), else plural (default +"s")."""
    return f"{n} {singular if n == 1 else (plural or singular + 's')}"


def extra_hint(extra: str) -> str:
    """How to install an optional extra, from a package index and from a checkout."""
    return f"pip install 'taprig[{extra}]' (in a checkout of taprig: pip install '.[{extra}]')"
