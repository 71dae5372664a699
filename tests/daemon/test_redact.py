"""Token redaction in logs: the token percent-encoded, double-encoded, split across records.

Percent-encoding as RFC 3986 §2.1 defines it, decoded here by Python's urllib.parse (an
outside decoder); "+" for a space as in HTML form encoding (application/x-www-form-urlencoded).
"""

from __future__ import annotations

import logging
import secrets
import urllib.parse
from pathlib import Path

import pytest

from taprig.daemon.auth import Auth
from taprig.daemon.redact import FRAGMENT, REDACTED, redact


@pytest.fixture
def token() -> str:
    return secrets.token_urlsafe(32)  # as daemon/auth.py makes them: 43 characters


def _encoded(text: str) -> str:
    """Every character percent-encoded, even those that need not be."""
    return "".join(f"%{b:02X}" for b in text.encode())


def _leaks(out: str, token: str) -> list[str]:
    """Pieces of `token` of FRAGMENT characters or more found in `out`, also once decoded."""
    found = []
    for text in {out, urllib.parse.unquote(out), urllib.parse.unquote(urllib.parse.unquote(out))}:
        for i in range(len(token) - FRAGMENT + 1):
            if token[i : i + FRAGMENT] in text:
                found.append(token[i : i + FRAGMENT])
    return found


def test_percent_encoded_tokens_are_redacted(token: str) -> None:
    lines = [
        f'127.0.0.1 "GET /v1/state?token={_encoded(token)} HTTP/1.1" 401',
        f'127.0.0.1 "GET /v1/state?key={token[:20]}%{ord(token[20]):02X}{token[21:]} HTTP/1.1"',
        f"GET /v1/tests?auth=Bearer%20{token}",
        f"GET /v1/tests?auth=Bearer+{token}",
        f"GET /v1/tests?t={urllib.parse.quote(_encoded(token))}",  # encoded twice
        f"GET /v1/tests?token%3D{token}",
    ]
    for line in lines:
        out = redact(line, [token])
        assert REDACTED in out, line
        assert not _leaks(out, token), (line, out)


def test_an_unknown_encoded_token_is_redacted_by_its_looks() -> None:
    other = secrets.token_urlsafe(32)
    out = redact(f"GET /v1/state?x={_encoded(other)}")
    assert REDACTED in out and not _leaks(out, other)


def test_tokens_split_across_records_are_redacted(token: str, tmp_path: Path) -> None:
    """A header cut in two records: each record loses its piece of the token."""
    auth = Auth(tmp_path)
    t = auth.token
    logger = logging.getLogger("taprig.test.redact_split")
    records: list[logging.LogRecord] = []

    class Keep(logging.Handler):
        def emit(self, record: logging.LogRecord) -> None:
            records.append(record)

    keep = Keep()
    f = auth.log_filter()
    logger.addFilter(f)
    logger.addHandler(keep)
    logger.propagate = False
    try:
        for cut in (FRAGMENT, 20, len(t) - FRAGMENT):
            logger.warning("bad header line %r", f"X-Auth: {t[:cut]}")
            logger.warning("continued %r", f"{t[cut:]}\r\n")
    finally:
        logger.removeFilter(f)
        logger.removeHandler(keep)
        logger.propagate = True
    assert len(records) == 6
    for record in records:
        message = record.getMessage()
        assert REDACTED in message and not _leaks(message, t), message


def test_what_is_not_a_secret_stays(token: str) -> None:
    digest = "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    for line in (
        f"sha256 {digest}",
        '127.0.0.1 "GET /v1/points?test=shop%20floor&since=12 HTTP/1.1" 200',
        "connection from 127.0.0.1 refused: its share of 32 is in use",
        f"short pieces stay: {token[: FRAGMENT - 1]}",
    ):
        assert redact(line, [token]) == line
