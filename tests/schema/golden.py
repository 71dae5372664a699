"""Fixed point sets and their encodings, one folder per wire schema version.

`golden/v3/` (schema 3, float32 spectra, hit records as integer codes with their scale) was
written by this module (``python tests/schema/golden.py --write``); `test_golden.py` checks
that today's code makes the same bytes, because the store keeps bodies as encoded at commit
and clients verify their digests. Do not rewrite them unless the wire format is changed on
purpose (a new SCHEMA_VERSION, and then into a new folder). `golden/v2/` holds what schema
2's code wrote (hit records as float32 SI values, `schema_2_hit_data`) and `golden/v1/` what
schema 1's code wrote (December 2026, before the wire module was split; also a store and a
mirror, `old_files.py`): never rewritten, they are what newer code must still read.

The arrays are built from exact IEEE arithmetic only (integers, halves and quarters, no
transcendental functions and no random generator), so they are the same on every platform
and numpy version; a few awkward values (NaN with a payload, ±inf, -0.0, a subnormal) are set
by their bit patterns.
"""

from __future__ import annotations

import hashlib
import json
import struct
import sys
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from taprig.daemon.records import Finding, PointSet, RovingMode, StoredHit
from taprig.daemon.wirebody import encode_body
from taprig.schema.codec import pack
from taprig.schema.objects import (
    change_to_obj,
    point_set_summary_json,
    point_set_to_obj,
    test_to_obj,
)
from taprig.schema.pointset import HitFields, field_values
from taprig.schema.records import WireChange, WireHit, WirePointSet, WireTest

FOLDER = Path(__file__).with_name("golden") / "v3"
DIGESTS = FOLDER / "digests.json"
OLD = FOLDER.with_name("v1")
"""Schema 1's encodings of the same point sets (its arrays float64), and its store and mirror."""
PREVIOUS = FOLDER.with_name("v2")
"""Schema 2's encodings of the same point sets (hit records float32 SI values, no scale)."""


def _real(*shape: int, offset: int = 0) -> np.ndarray:
    """Exactly representable values (multiples of 1/4 between -8 and 8), awkward ones first."""
    a = ((np.arange(int(np.prod(shape)), dtype="<f8") * 7 + offset) % 64 - 32) / 4
    odd = np.array([-0.0, np.inf, -np.inf, 5e-324, 0.0], dtype="<f8")
    nan = np.frombuffer(struct.pack("<Q", 0x7FF8_0000_DEAD_BEEF), "<f8")
    a[: min(a.size, 6)] = np.concatenate([odd, nan])[: min(a.size, 6)]
    return a.reshape(shape)


def _cplx(*shape: int, offset: int = 0) -> np.ndarray:
    c = np.empty(shape, dtype="<c16")
    c.real, c.imag = _real(*shape, offset=offset), _real(*shape, offset=offset + 3)[..., ::-1]
    return c


LARGE_F = 4200
"""Lines of the large point set (2100 in schema 1, when a complex value took 16 bytes)."""


def _codes(i: int, channels: int, block: int) -> tuple[np.ndarray, np.ndarray]:
    """(codes, scale) of hit `i`: int16 codes for even hits, int24 codes in int32 for odd
    ones, both ends of the range among them; a scale of exact binary fractions."""
    bits = 16 if i % 2 == 0 else 24
    n = channels * block
    span = 1 << bits
    codes = (np.arange(n, dtype=np.int64) * 40503 + 977 * i) % span - span // 2
    codes[:2] = (-(span // 2), span // 2 - 1)
    scale = np.array([(c + 1) * 0.5 ** (bits - 1) for c in range(channels)], dtype="<f8")
    return codes.reshape(channels, block).astype("<i2" if bits == 16 else "<i4"), scale


def schema_2_hit_data(i: int, n_resp: int = 2, block: int = 16) -> np.ndarray:
    """Hit `i`'s record as `golden/v2/` holds it (float32 values)."""
    return _real(1 + n_resp, block, offset=i).astype("<f4")


def assert_schema_2_hits(hits: Sequence[HitFields[Any]]) -> None:
    """`hits` hold `golden/v2/`'s records as today's code reads them: the float32 values bit
    for bit, a scale of 1.0, and `si()` their widening to float64, which is exact (IEEE
    754-2008 §5.4.2: every binary32 value is a binary64 value)."""
    assert len(hits) == 2
    for i, hit in enumerate(hits):
        was = schema_2_hit_data(i)
        assert hit.data is not None and hit.scale is not None
        assert hit.data.dtype == np.float32 and hit.data.tobytes() == was.tobytes()
        assert hit.scale.dtype == np.float64 and hit.scale.tolist() == [1.0] * was.shape[0]
        si = hit.si()
        assert si is not None and np.array_equal(si, was.astype(np.float64), equal_nan=True)


Values = Callable[..., np.ndarray]
"""(*shape, offset=k) -> array of that shape; k tells arrays of one point set apart."""


def wire_point_set(
    n_resp: int = 2,
    n_freq: int = 9,
    n_hits: int = 2,
    real: Values = _real,
    cplx: Values = _cplx,
    block: int = 16,
) -> WirePointSet:
    """A fixed `WirePointSet` (hits with data); `real` and `cplx` make its arrays."""
    records = [_codes(i, 1 + n_resp, block) for i in range(n_hits)]
    hits = tuple(
        WireHit(
            trigger_index=4096 * i + 17,
            utc=f"2026-11-30T09:15:{i:02d}.125Z",
            accepted=i % 2 == 0,
            peak_force_n=150.5 + i if i else float("nan"),
            pulse_width_s=0.000375 * (i + 1),
            findings=(("double_hit", "a second pulse 3 ms after the first"),) if i else (),
            data=records[i][0],
            scale=records[i][1],
        )
        for i in range(n_hits)
    )
    return WirePointSet(
        id=41,
        test="bracket-2026",
        point="D2",
        version=3,
        seq=118,
        completed_utc="2026-11-30T09:15:07.500Z",
        roving_mode="hammer",
        drive_point="D2",
        response_labels=tuple(f"acc{i + 1}" for i in range(n_resp)),
        response_points=tuple(f"A{i + 1}" for i in range(n_resp)),
        n_averages=n_hits,
        freq_hz=np.arange(n_freq, dtype="<f8") * 0.5,
        h1=cplx(n_resp, n_freq, offset=1),
        h2=cplx(n_resp, n_freq, offset=2),
        coherence=real(n_resp, n_freq, offset=5),
        gff=real(n_freq, offset=6),
        gxx=real(n_resp, n_freq, offset=7),
        gfx=cplx(n_resp, n_freq, offset=8),
        hits=hits,
        meta={"operator": "mt", "window": {"force_s": 0.002, "tau_s": 0.25}, "tags": [1, "x"]},
    )


def daemon_point_set(n_resp: int = 2, n_freq: int = 9) -> PointSet:
    """The daemon's record of the same measurement, as the store hands it to the encoder."""
    w = wire_point_set(n_resp, n_freq)
    hits = tuple(
        StoredHit(h.trigger_index, h.utc, h.accepted, h.peak_force_n, h.pulse_width_s,
                  tuple(Finding(c, m) for c, m in h.findings), None, None)
        for h in w.hits
    )  # fmt: skip
    values = {**field_values(w), "roving_mode": RovingMode.HAMMER}
    return PointSet(**values, hits=hits)


def encodings() -> dict[str, bytes]:
    """Every golden encoding by its file name."""
    small = wire_point_set()
    # 2 × 4200 complex64 = 67,200 bytes: above the codec's splice threshold (65,536).
    large = wire_point_set(n_resp=2, n_freq=LARGE_F, n_hits=1)
    test = WireTest(
        "bracket-2026", "sensor", "B1", 4, "2026-11-30T08:00:00.000Z", 3,
        (("A1", 0.0, 0.0, 0.0, "+z"), ("B1", 0.125, -0.25, 0.5, "-x")), {"site": "bay 2"},
    )  # fmt: skip
    return {
        "point-set-hits.msgpack": pack(point_set_to_obj(small, with_hits=True)),
        "point-set-bare.msgpack": pack(point_set_to_obj(small, with_hits=False)),
        "point-set-large.msgpack": pack(point_set_to_obj(large, with_hits=True)),
        "store-body.msgpack": encode_body(41, daemon_point_set())[2],
        "test.msgpack": pack(test_to_obj(test)),
        "change.msgpack": pack(change_to_obj(WireChange(119, "point_set", "bracket-2026", 41))),
        "summary.json": json.dumps(point_set_summary_json(small)).encode(),
    }


KEPT_WHOLE = 100_000
"""bytes: encodings up to this size are kept as files; larger ones only by their SHA-256."""


def write() -> None:
    FOLDER.mkdir(parents=True, exist_ok=True)
    digests = {}
    for name, data in encodings().items():
        digests[name] = hashlib.sha256(data).hexdigest()
        if len(data) <= KEPT_WHOLE:
            (FOLDER / name).write_bytes(data)
    DIGESTS.write_text(json.dumps(digests, indent=1, sort_keys=True) + "\n")


if __name__ == "__main__":
    if sys.argv[1:] != ["--write"]:
        sys.exit("usage: python tests/schema/golden.py --write  (rewrites the golden files)")
    write()
