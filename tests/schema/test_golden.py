"""Today's encoder makes exactly the bytes the wire code made before it was split.

The golden files were written by `golden.py` from that earlier code. The store keeps bodies
encoded by older code and a client checks every body against the SHA-256 the rig sends, so a
change in any byte breaks either the served bodies or the digests; the wire format changes
only with a new SCHEMA_VERSION. SHA-256: FIPS 180-4 (NIST, 2015), through hashlib.
"""

from __future__ import annotations

import hashlib
import json

import pytest

from taprig.schema import codec, objects

from . import golden

ENCODINGS = golden.encodings()
DIGESTS: dict[str, str] = json.loads(golden.DIGESTS.read_text())


def test_every_encoding_has_a_golden_digest() -> None:
    assert sorted(ENCODINGS) == sorted(DIGESTS)


@pytest.mark.parametrize("name", sorted(DIGESTS))
def test_encoding_is_byte_identical_to_the_golden_one(name: str) -> None:
    data = ENCODINGS[name]
    kept = golden.FOLDER / name
    if kept.exists():
        assert data == kept.read_bytes(), name
    assert hashlib.sha256(data).hexdigest() == DIGESTS[name], name


def test_the_spliced_encoding_is_covered() -> None:
    """The large point set takes the packer's splice path (bins of SPLICE_MIN bytes or more)."""
    ps = golden.wire_point_set(n_resp=2, n_freq=2100, n_hits=1)
    assert ps.h1.nbytes >= codec.SPLICE_MIN


@pytest.mark.parametrize("name", ["point-set-hits.msgpack", "store-body.msgpack"])
def test_golden_bodies_decode_and_encode_again_to_themselves(name: str) -> None:
    """A body an older rig stored decodes strictly and re-encodes to the same bytes."""
    data = (golden.FOLDER / name).read_bytes()
    ps = objects.point_set_from_obj(codec.unpack(data, max_bytes=len(data)))
    with_hits = all(h.data is not None for h in ps.hits)
    assert codec.pack(objects.point_set_to_obj(ps, with_hits)) == data
