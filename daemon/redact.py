"""Keeping secrets out of logs: the rig's token and anything that looks like one.

A secret can reach a log line in disguise, so three forms are caught besides the plain one:

- **Percent-encoded** (a client putting the token in a query string, ``?token=%41%62...`` or
  ``Bearer%20...``): every run of URL characters holding a ``%XX`` escape is decoded (up to
  three times, for double encoding) and redacted whole when the decoded text holds a secret
  or looks like one.
- **Split** (a header cut across two log records, or across lines of one): any piece of a
  known secret `FRAGMENT` characters or longer is redacted where it stands, so each record
  loses its part of the token. A piece shorter than that may stay: with 43-character tokens
  (256 bits) the rest of the token still holds over 200 unknown bits.
- **Looks like a token**: the value after ``Bearer`` or ``token=`` / ``token:``, and any run
  of exactly 43 URL-safe base64 characters (the length of daemon/auth.py's tokens). A
  64-digit SHA-256 hex digest is left alone.
"""

from __future__ import annotations

import logging
import re
import urllib.parse
from collections.abc import Callable, Iterable
from typing import Final

REDACTED: Final = "<redacted>"
FRAGMENT: Final = 8  # shortest piece of a known secret redacted on its own, characters
_REDACT_BEARER: Final = re.compile(r"(?i)\b(bearer\s+)[A-Za-z0-9._~+/-]+=*")
_REDACT_PARAM: Final = re.compile(r"(?i)\b(token\s*[=:]\s*)[A-Za-z0-9._~+/-]+=*")
_REDACT_LIKE: Final = re.compile(r"(?<![A-Za-z0-9_-])[A-Za-z0-9_-]{43}(?![A-Za-z0-9_-])")
# A run of characters a URL may carry, with at least one percent escape in it.
_ENCODED_RUN: Final = re.compile(
    r"[A-Za-z0-9._~+/=:&?-]*(?:%[0-9A-Fa-f]{2}[A-Za-z0-9._~+/=:&?%-]*)+"
)
_TOKEN_RUN: Final = re.compile(rf"[A-Za-z0-9_-]{{{FRAGMENT},}}")


def redact(text: str, known: Iterable[str] = ()) -> str:
    """`text` with each of the `known` secrets, in every form the module docstring lists,
    and anything that looks like a token replaced by ``<redacted>``."""
    secrets = [s for s in known if s]
    for secret in secrets:
        text = text.replace(secret, REDACTED)
    if "%" in text:
        text = _ENCODED_RUN.sub(lambda m: _encoded(m.group(0), secrets), text)
    if secrets:
        grams = {s[i : i + FRAGMENT] for s in secrets for i in range(len(s) - FRAGMENT + 1)}
        text = _TOKEN_RUN.sub(lambda m: _pieces(m.group(0), grams), text)
    text = _REDACT_BEARER.sub(lambda m: m.group(1) + REDACTED, text)
    text = _REDACT_PARAM.sub(lambda m: m.group(1) + REDACTED, text)
    return _REDACT_LIKE.sub(REDACTED, text)


def _encoded(run: str, secrets: list[str]) -> str:
    """`run` unchanged, or redacted whole when its decoded form holds a secret."""
    decoded = run
    for _ in range(3):  # double (or triple) encoding
        step = urllib.parse.unquote_plus(decoded)
        if step == decoded:
            break
        decoded = step
    if redact(decoded, secrets) == decoded:
        return run
    return REDACTED


def _pieces(run: str, grams: set[str]) -> str:
    """`run` with every stretch covered by a piece of a known secret replaced."""
    hit = [False] * len(run)
    found = False
    for i in range(len(run) - FRAGMENT + 1):
        if run[i : i + FRAGMENT] in grams:
            hit[i : i + FRAGMENT] = [True] * FRAGMENT
            found = True
    if not found:
        return run
    out: list[str] = []
    for i, ch in enumerate(run):
        if not hit[i]:
            out.append(ch)
        elif i == 0 or not hit[i - 1]:
            out.append(REDACTED)
    return "".join(out)


class RedactingFilter(logging.Filter):
    """A logging filter that passes every record with its message run through `redact`;
    `known()` gives the secrets of the moment (a rotated token is redacted at once)."""

    def __init__(self, known: Callable[[], Iterable[str]]) -> None:
        super().__init__()
        self._known = known

    def filter(self, record: logging.LogRecord) -> bool:
        message = record.getMessage()
        clean = redact(message, self._known())
        if clean != message:
            record.msg, record.args = clean, None
        return True
