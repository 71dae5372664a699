"""Keeping secrets out of logs: the rig's token and anything that looks like one."""

from __future__ import annotations

import logging
import re
from collections.abc import Callable, Iterable
from typing import Final

# Things in a log line that look like credentials, whatever the current token is.
REDACTED: Final = "<redacted>"
_REDACT_BEARER: Final = re.compile(r"(?i)\b(bearer\s+)[A-Za-z0-9._~+/-]+=*")
_REDACT_PARAM: Final = re.compile(r"(?i)\b(token\s*[=:]\s*)[A-Za-z0-9._~+/-]+=*")
_REDACT_LIKE: Final = re.compile(r"(?<![A-Za-z0-9_-])[A-Za-z0-9_-]{43}(?![A-Za-z0-9_-])")


def redact(text: str, known: Iterable[str] = ()) -> str:
    """`text` with each of the `known` secrets and anything that looks like a token replaced.

    Looks like a token: the value after ``Bearer`` or after ``token=`` / ``token:``, and any
    run of exactly 43 URL-safe base64 characters (the length of this module's tokens).
    A 64-digit SHA-256 hex digest is left alone. (Tokens: daemon/auth.py.)
    """
    for secret in known:
        if secret:
            text = text.replace(secret, REDACTED)
    text = _REDACT_BEARER.sub(lambda m: m.group(1) + REDACTED, text)
    text = _REDACT_PARAM.sub(lambda m: m.group(1) + REDACTED, text)
    return _REDACT_LIKE.sub(REDACTED, text)


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
