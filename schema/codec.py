"""The msgpack codec of the wire: `pack`, and `unpack` with strict decoding and size limits.

Bodies of content type `schema.http.MSGPACK` are one msgpack message: an object made by
`schema.objects` (maps with str keys, lists, str, int, float, bool, None, and bin for array
bytes). `unpack` refuses anything else before allocating for it.
"""

from __future__ import annotations

from typing import Any, NoReturn

import msgpack

from .records import SchemaError

SPLICE_MIN = 1 << 16  # bytes: bins this large are spliced in, not copied by the packer


def pack(obj: Any) -> bytes:
    """msgpack bytes of `obj` (str as str, bytes as bin); SchemaError if it cannot be packed.

    Exactly msgpack.packb's output. Large bins (array data) are packed as short
    placeholders and joined in afterwards, so their bytes are copied once, by one join,
    instead of through the packer's growing buffer: about twice as fast for point sets.
    """
    big: list[bytes | memoryview] = []
    light = _lighten(obj, big)
    try:
        data: bytes = msgpack.packb(light, use_bin_type=True, datetime=False)
    except (TypeError, ValueError, OverflowError) as exc:
        raise SchemaError(f"cannot pack as msgpack: {exc}") from exc
    if not big:
        return data
    parts: list[bytes | memoryview] = []
    pos = 0
    for k, blob in enumerate(big):
        marker = _marker(k)
        at = data.index(marker, pos)
        # bin 32: 0xc6 then the length as a big-endian u32 (the msgpack spec, "bin format
        # family"); msgpack itself uses it for every bin of 65536 bytes or more.
        parts += [data[pos:at], b"\xc6", len(blob).to_bytes(4, "big"), blob]
        pos = at + len(marker)
    parts.append(data[pos:])
    return b"".join(parts)


_MARK = b"\x00taprig-splice\x00"


def _marker(k: int) -> bytes:
    """The packed placeholder of the k-th large bin: a bin 8 that no real bin can equal
    (real large bins are never this short)."""
    body = _MARK + k.to_bytes(4, "big")
    return b"\xc4" + bytes([len(body)]) + body


def _lighten(obj: Any, big: list[bytes | memoryview]) -> Any:
    """`obj` with every bin of SPLICE_MIN bytes or more replaced by a numbered placeholder."""
    if isinstance(obj, bytes | bytearray | memoryview) and len(obj) >= SPLICE_MIN:
        big.append(obj if isinstance(obj, bytes) else memoryview(obj).cast("B"))
        return _marker(len(big) - 1)[2:]
    if isinstance(obj, dict):
        return {k: _lighten(v, big) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_lighten(v, big) for v in obj]
    return obj


def _no_ext(code: int, data: bytes) -> NoReturn:
    raise SchemaError(f"msgpack extension type {code} is not part of this schema")


def unpack(data: bytes, *, max_bytes: int) -> Any:
    """The object of one msgpack message `data`; SchemaError for anything else.

    Refused with SchemaError: more than `max_bytes` bytes; truncated input or bytes after the
    object; a str that is not UTF-8; a map key that is not a str (strict_map_key); any
    extension type (msgpack's timestamp too); nesting deeper than msgpack's stack.

    Limits: every declared length is bounded by `n = len(data)` (≤ max_bytes): a str or bin
    of L bytes needs L bytes, an array of L items at least L bytes, a map of L pairs at least
    2L, so max_str_len = max_bin_len = max_array_len = n and max_map_len = n // 2 refuse
    nothing valid, while a header that declares more than the message could hold (a 5-byte
    array header of 4 × 10⁹ items) is refused as soon as it is read, before anything is
    allocated for it, whatever the unpacker's allocation strategy.
    """
    if max_bytes < 0:
        raise ValueError(f"max_bytes must be >= 0, got {max_bytes}")
    if not isinstance(data, bytes | bytearray | memoryview):
        raise SchemaError(f"expected bytes, got {type(data).__name__}")
    n = memoryview(data).nbytes
    if n > max_bytes:
        raise SchemaError(f"message of {n} bytes is larger than the limit of {max_bytes} bytes")
    try:
        return msgpack.unpackb(
            data,
            raw=False,
            use_list=True,
            strict_map_key=True,
            max_bin_len=n,
            max_str_len=n,
            max_array_len=n,
            max_map_len=n // 2,
            max_ext_len=0,
            ext_hook=_no_ext,
        )
    except SchemaError:
        raise
    except Exception as exc:  # the C unpacker raises ValueError subclasses, also others
        raise SchemaError(f"not a valid msgpack message: {type(exc).__name__}: {exc}") from exc
