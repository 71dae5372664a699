"""Content negotiation and checksums (schema.http).

Outside facts the checks rely on, all cited from memory:

- FIPS 180-2 (NIST, 2002), Appendix B.1: SHA-256("abc") =
  ba7816bf 8f01cfea 414140de 5dae2223 b00361a3 96177a9c b410ff61 f20015ad.
- RFC 9110 (2022) §12.5.1: the most specific media range that matches a type gives its q;
  q=0 means "not acceptable".
- RFC 9530 (2024) §2: Content-Digest carries ``sha-256=:<base64 of the digest>:``.
"""

from __future__ import annotations

import pytest

from taprig.schema import http


@pytest.mark.parametrize(
    ("accept", "msgpack"),
    [
        (None, False),
        ("", False),
        ("*/*", False),  # a tie goes to JSON
        ("application/*", False),
        ("application/json", False),
        (http.MSGPACK, True),
        (http.MSGPACK.upper(), True),  # media types compare case-insensitively
        (f"{http.MSGPACK}, */*", True),  # named beats wildcard at the same q
        (f"{http.MSGPACK};q=0.5, application/json", False),
        (f"{http.MSGPACK}; q=0.9, application/json;q=0.8", True),
        (f"{http.MSGPACK};q=0, */*", False),  # q=0: not acceptable
        (f"application/json;q=0, {http.MSGPACK};q=0.1", True),
        ("text/html, application/xhtml+xml, */*;q=0.8", False),  # a browser
        ("application/vnd.taprig.v2+msgpack", False),  # another version is another type
        ("garbage;;;, ,", False),
        (f"{http.MSGPACK};q=abc", False),  # a malformed q: the range is ignored
        (f"{http.MSGPACK};q=1.5", False),
        (f"{http.MSGPACK};q=0.001", True),
        (f"{http.MSGPACK};q=1.000, application/json;q=0.999", True),
    ],
)
def test_wants_msgpack(accept: str | None, msgpack: bool) -> None:
    """RFC 9110 §12.5.1 precedence and q values; our tie rule: JSON."""
    assert http.wants_msgpack(accept) is msgpack


def test_digest_matches_the_published_sha256_vector() -> None:
    """FIPS 180-2, Appendix B.1: SHA-256 of "abc"."""
    assert http.digest(b"abc") == (
        "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    )
