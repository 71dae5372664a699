"""HTTP for the wire: content types and negotiation, and checksums of transferred bodies.

The rig answers `MSGPACK` or `JSON` after the request's Accept header (`wants_msgpack`) and
sends the SHA-256 of every point-set body in a Content-Digest header (`content_digest`), which
the client checks (`digest_matches`) before it keeps the bytes.
"""

from __future__ import annotations

import base64
import hashlib
import re
from typing import Final

MSGPACK: Final = "application/vnd.taprig.v1+msgpack"
"""Content type of msgpack bodies (point sets with arrays; also everything else)."""
JSON: Final = "application/json"
"""Content type of JSON bodies (listings, tests, changes: everything without arrays)."""

_MEDIA_RANGE = re.compile(r"\s*([^\s/;,]+)/([^\s/;,]+)\s*((?:;[^,]*)?)")
_Q_PARAM = re.compile(r";\s*q\s*=\s*([^;\s]*)", re.I)
_QVALUE = re.compile(r"0(?:\.[0-9]{0,3})?|1(?:\.0{0,3})?")  # RFC 9110 §12.4.2


def _accept_quality(accept: str, media_type: str) -> tuple[float, int]:
    """(q, specificity) of the most specific media range of `accept` matching `media_type`.

    RFC 9110 §12.5.1: the most specific range wins (type/subtype 2, type/* 1, */* 0) and
    gives its q; q=0 means "not acceptable". (0.0, -1) if nothing matches.
    """
    kind, sub = media_type.split("/")
    best = (0.0, -1)
    for part in accept.split(","):
        m = _MEDIA_RANGE.fullmatch(part)
        if not m:
            continue
        t, s, params = m.group(1).lower(), m.group(2).lower(), m.group(3)
        if (t, s) == (kind, sub):
            spec = 2
        elif t == kind and s == "*":
            spec = 1
        elif (t, s) == ("*", "*"):
            spec = 0
        else:
            continue
        q_match = _Q_PARAM.search(params)
        if q_match and not _QVALUE.fullmatch(q_match.group(1)):
            continue  # a malformed q: the range is ignored
        q = float(q_match.group(1)) if q_match else 1.0
        if spec > best[1]:
            best = (q, spec)
    return best


def wants_msgpack(accept_header: str | None) -> bool:
    """Whether to answer `MSGPACK` (True) rather than `JSON` (False) to this Accept header.

    msgpack when it is acceptable (q > 0) and preferred: a higher q than JSON's, or the same
    q from a more specific range (``MSGPACK, */*`` → msgpack). Otherwise JSON, also for no
    header and for ``*/*`` alone, so that curl and browsers get readable answers.
    """
    if not accept_header:
        return False
    mp = _accept_quality(accept_header, MSGPACK)
    js = _accept_quality(accept_header, JSON)
    return mp[0] > 0 and mp > js


def digest(data: bytes) -> str:
    """SHA-256 of `data` as 64 lower-case hex digits (FIPS 180-4), to verify a transfer."""
    return hashlib.sha256(data).hexdigest()


def content_digest(body: bytes | memoryview) -> str:
    """The Content-Digest header value of `body`: its SHA-256 (RFC 9530 §2), as the rig sends."""
    return "sha-256=:" + base64.b64encode(hashlib.sha256(body).digest()).decode() + ":"


def digest_matches(header: str | None, body: bytes | memoryview) -> bool:
    """True when a Content-Digest header carries the SHA-256 of `body` (other algorithms in
    the same header are ignored; no sha-256 entry at all is a mismatch)."""
    want = content_digest(body)[len("sha-256=") :]
    for entry in (header or "").split(","):
        name, _, value = entry.strip().partition("=")
        if name.strip().lower() == "sha-256" and value.strip() == want:
            return True
    return False
