"""The DNS-SD TXT record a rig announces itself with (RFC 6763 §6), layout in taprig.schema."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Final

from taprig.schema import API_VERSION, TXT_API, TXT_ID, TXT_RUN, TXT_TEST

TXT_KEY_MAX_CHARS: Final = 9  # RFC 6763 §6.4
TXT_MAX_BYTES: Final = 200  # RFC 6763 §6.2: the whole record, length octets included
TXT_STRING_MAX_BYTES: Final = 255  # RFC 1035 §3.3: a <character-string> has a 1-octet length
# Our choice: leaves the record well under TXT_MAX_BYTES with the longest id.
TEST_NAME_MAX_BYTES: Final = 64


def encode_txt(entries: Mapping[str, str]) -> bytes:
    """DNS-SD TXT record data for ``key=value`` entries, in order.

    Raises ValueError naming the key when a key is empty, longer than 9 characters
    (RFC 6763 §6.4), not printable ASCII or contains "=" (§6.4), repeats another key
    ignoring case, or when an entry exceeds 255 bytes or the whole record 200 bytes
    (RFC 6763 §6.2; the error then names the largest entry).
    """
    out = bytearray()
    sizes: dict[str, int] = {}
    seen: set[str] = set()
    for key, value in entries.items():
        if not 1 <= len(key) <= TXT_KEY_MAX_CHARS:
            raise ValueError(
                f"TXT key {key!r} has {len(key)} characters; 1 to {TXT_KEY_MAX_CHARS} allowed "
                "(RFC 6763 §6.4)"
            )
        if "=" in key or not all(0x20 <= ord(c) <= 0x7E for c in key):
            raise ValueError(f"TXT key {key!r}: printable ASCII without '=' only (RFC 6763 §6.4)")
        if key.lower() in seen:
            raise ValueError(f"TXT key {key!r} appears twice (keys ignore case, RFC 6763 §6.4)")
        seen.add(key.lower())
        item = f"{key}={value}".encode()
        if len(item) > TXT_STRING_MAX_BYTES:
            raise ValueError(
                f"TXT entry {key!r} is {len(item)} bytes; at most {TXT_STRING_MAX_BYTES} allowed"
            )
        out.append(len(item))
        out += item
        sizes[key] = 1 + len(item)
    if not out:
        raise ValueError("TXT record has no entries")
    if len(out) > TXT_MAX_BYTES:
        largest = max(sizes, key=sizes.__getitem__)
        raise ValueError(
            f"TXT record is {len(out)} bytes; at most {TXT_MAX_BYTES} allowed (RFC 6763 §6.2); "
            f"largest entry is {largest!r} ({sizes[largest]} bytes)"
        )
    return bytes(out)


def cut_utf8(text: str, max_bytes: int) -> str:
    """The longest prefix of text whose UTF-8 encoding fits in max_bytes."""
    # Slicing the bytes may split a character; dropping the partial tail keeps valid UTF-8.
    return text.encode()[:max_bytes].decode(errors="ignore")


def rig_txt(rig_id: str, *, running: bool, test: str | None) -> bytes:
    """The TXT record of a rig (layout in `taprig.schema`); test is cut to 64 bytes."""
    entries = {TXT_API: str(API_VERSION), TXT_ID: rig_id, TXT_RUN: "1" if running else "0"}
    if test:
        entries[TXT_TEST] = cut_utf8(test, TEST_NAME_MAX_BYTES)
    return encode_txt(entries)
