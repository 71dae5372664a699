"""The msgpack codec (schema.codec): exactly msgpack's bytes, and limits on what it unpacks.

Outside facts the checks rely on, all cited from memory:

- MessagePack specification (msgpack/msgpack, spec.md, "Formats"): bin 32 ``0xc6`` and str 32
  ``0xdb`` take a 4-byte big-endian length; array 32 ``0xdd`` and map 32 ``0xdf`` a 4-byte
  count; ext 8 ``0xc7`` (length, type, data), fixext 4 ``0xd6``; type -1 is the timestamp;
  ``0xc1`` is never used; map 16 ``0xde`` takes a 2-byte count; fixmap ``0x80 | n``,
  fixarray ``0x90 | n``, fixstr ``0xa0 | n``, nil ``0xc0``.
- msgpack-python's `packb` is the reference encoder the spliced packer is held to.
"""

from __future__ import annotations

import contextlib

import msgpack
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from taprig.schema import codec, objects
from taprig.schema.records import SchemaError

from .fixtures import BIG, make_point_set


def test_pack_refuses_what_msgpack_cannot_carry() -> None:
    for bad in (object(), np.int64(3), 2**64, {"a": {1, 2}}):
        with pytest.raises(SchemaError):
            codec.pack(bad)


def test_size_limit_is_exact() -> None:
    data = codec.pack({"k": "v" * 100})
    assert codec.unpack(data, max_bytes=len(data)) == {"k": "v" * 100}
    with pytest.raises(SchemaError, match=f"{len(data)} bytes"):
        codec.unpack(data, max_bytes=len(data) - 1)


def test_largest_containers_that_fit_are_accepted() -> None:
    """Limits refuse nothing valid: an array of n one-byte items in n + 3 bytes (array 16),
    and a map whose entries are as small as distinct str keys allow."""
    arr = codec.pack([0] * 1000)
    assert len(arr) == 1003 and codec.unpack(arr, max_bytes=len(arr)) == [0] * 1000
    keys = {chr(0x41 + i): None for i in range(26)}  # 1-char key (2 bytes) + nil (1 byte)
    m = codec.pack(keys)
    assert (
        len(m) == 3 + 3 * 26
    )  # map 16: 0xde and a 2-byte count and codec.unpack(m, max_bytes=len(m)) == keys
    blob = codec.pack(b"\x01" * 300)
    assert codec.unpack(blob, max_bytes=len(blob)) == b"\x01" * 300


@pytest.mark.parametrize(
    ("data", "limit"),
    [
        (b"\xdd\xff\xff\xff\xff", "max_array_len"),  # array 32 of 4 294 967 295 items
        (b"\xdf\xff\xff\xff\xff", "max_map_len"),  # map 32 of 4 294 967 295 pairs
        (b"\x81\xa1k\xdd\x7f\xff\xff\xff", "max_array_len"),  # {"k": array of 2**31 - 1}
        (b"\x92\x00\xdf\x00\x00\x00\x06\xa1a\x00", "max_map_len"),  # 10 bytes; 6 pairs need 12
        (b"\xc6\xff\xff\xff\xff" + b"\x00" * 16, None),  # bin 32 of 4 GiB
        (b"\xdb\xff\xff\xff\xff" + b"a" * 16, None),  # str 32 of 4 GiB
    ],
)
def test_oversized_declarations_are_refused(data: bytes, limit: str | None) -> None:
    """A few bytes that declare more than they hold fail; for containers it is the limit
    derived from the message length that stops them (msgpack names the limit)."""
    with pytest.raises(SchemaError) as e:
        codec.unpack(data, max_bytes=BIG)
    if limit:
        assert limit in str(e.value)


def test_truncated_messages_are_refused() -> None:
    data = codec.pack(objects.point_set_to_obj(make_point_set(), True))
    for cut in sorted({1, 2, 7, 100, len(data) // 2, len(data) - 1}):
        with pytest.raises(SchemaError):
            codec.unpack(data[:cut], max_bytes=BIG)


@pytest.mark.parametrize(
    "data",
    [
        b"",
        b"\xc1",  # never used
        b'{"schema": 1}',  # JSON is not msgpack (0x7b is fixint 123, then extra bytes)
        b"\x01\x02",  # two objects
        b"\xa2\xff\xfe",  # str that is not UTF-8
        b"\x81\x01\x02",  # int map key
        b"\x81\x91\x01\x02",  # array map key
        b"\xc7\x00\x05",  # ext 8 of length 0, type 5
        b"\xd6\xff\x00\x00\x00\x00",  # timestamp 32
        b"\x91" * 5000 + b"\xc0",  # nesting deeper than the unpacker's stack
    ],
)
def test_not_msgpack_of_this_schema(data: bytes) -> None:
    with pytest.raises(SchemaError):
        codec.unpack(data, max_bytes=BIG)


def test_unpack_refuses_non_bytes() -> None:
    with pytest.raises(SchemaError):
        codec.unpack("text", max_bytes=BIG)  # type: ignore[arg-type]


@settings(max_examples=400, deadline=None)
@given(st.binary(max_size=512))
def test_arbitrary_bytes_only_ever_raise_schema_error(data: bytes) -> None:
    try:
        obj = codec.unpack(data, max_bytes=256)
    except SchemaError:
        return
    assert len(data) <= 256
    for decode in (objects.point_set_from_obj, objects.test_from_obj, objects.change_from_obj):
        with contextlib.suppress(SchemaError):
            decode(obj)


GOOD_BYTES = codec.pack(objects.point_set_to_obj(make_point_set(n_freq=5, n_hits=1), True))


@settings(max_examples=300, deadline=None)
@given(st.lists(st.tuples(st.integers(0, len(GOOD_BYTES) - 1), st.integers(0, 255)),
                min_size=1, max_size=6))  # fmt: skip
def test_corrupted_point_sets_only_ever_raise_schema_error(edits: list[tuple[int, int]]) -> None:
    """A valid message with a few bytes changed either decodes to a consistent point set or
    raises SchemaError, never anything else."""
    data = bytearray(GOOD_BYTES)
    for at, value in edits:
        data[at] = value
    try:
        ps = objects.point_set_from_obj(codec.unpack(bytes(data), max_bytes=BIG))
    except SchemaError:
        return
    assert ps.h1.shape == (len(ps.response_labels), ps.freq_hz.shape[0])


def test_pack_splices_large_bins_into_exactly_msgpacks_bytes() -> None:
    """codec.pack must equal msgpack.packb (the reference implementation of the msgpack
    spec) byte for byte, large bins included, at and around the splice threshold."""
    rng = np.random.default_rng(5)
    for size in (codec.SPLICE_MIN - 1, codec.SPLICE_MIN, codec.SPLICE_MIN + 1, 3_000_000):
        blob = rng.bytes(size)
        obj = {"a": [1, {"data": blob, "n": "x"}], "b": b"tiny", "c": (blob, memoryview(blob))}
        ref = msgpack.packb(obj, use_bin_type=True)
        assert codec.pack(obj) == ref
        assert codec.unpack(codec.pack(obj), max_bytes=1 << 24)["a"][1]["data"] == blob
