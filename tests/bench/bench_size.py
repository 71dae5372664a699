"""Bytes per point set: what a pull carries for 2 responses and a 16k block.

A point set as the rig commits it (2 responses, a block of 16,384 samples, so 8,193 lines;
5 hits of 3 channels, 4 counted and 1 rejected), encoded by the daemon's own encoder: the
body stored at commit (what a pull takes by default, hits without records) and the body with
every hit's record (``?hits=1``), the records as a 16-bit converter's codes (int16), a 24-bit
one's (int32), and as the float32 SI values schema 2 kept, each beside the body without
records. Printed beside them: the spectra's own bytes (the arrays' raw bytes, the floor any
encoding must carry), the same arrays' bytes in schema 1 (float64 / complex128), and the
goal of 1 MB.

Run: python tests/bench/bench_size.py
"""

from __future__ import annotations

import numpy as np
from table import Figure, Row, pick, show

from taprig.daemon.records import Finding, PointSet, RovingMode, StoredHit
from taprig.daemon.wirebody import encode_body
from taprig.schema import codec, objects, records
from taprig.schema.pointset import ARRAYS, SCHEMA_DTYPES, hit_record

N_RESP = 2
BLOCK = 16_384
N_FREQ = BLOCK // 2 + 1
N_HITS = 5
GOAL_MB = 1.0


def point_set(bits: int | None = 16) -> PointSet:
    """Random spectra (float64, as computed) and hit records of the benchmark's shape: codes
    of a `bits`-bit converter with their scale, or float32 SI values (None)."""
    rng = np.random.default_rng(14)

    def cplx(*shape: int) -> np.ndarray:
        return rng.standard_normal(shape) + 1j * rng.standard_normal(shape)

    per_count = None if bits is None else np.full(1 + N_RESP, 10.0 / 2**bits)
    records_ = [
        hit_record(rng.standard_normal((1 + N_RESP, BLOCK)), per_count, bits or 32)
        for _ in range(N_HITS)
    ]
    hits = tuple(
        StoredHit(4096 * i, f"2026-12-03T10:00:{i:02d}.000Z", i < 4, 40.0 + i, 8e-4,
                  () if i < 4 else (Finding("double_hit", "a second pulse"),), *records_[i])
        for i in range(N_HITS)
    )  # fmt: skip
    return PointSet(
        test="bench", point="P1", version=1, seq=2, completed_utc="2026-12-03T10:00:05.000Z",
        roving_mode=RovingMode.HAMMER, drive_point="P1", response_labels=("acc1", "acc2"),
        response_points=("P1", "P9"), n_averages=4, freq_hz=np.linspace(0, 12_800, N_FREQ),
        h1=cplx(N_RESP, N_FREQ), h2=cplx(N_RESP, N_FREQ),
        coherence=rng.uniform(size=(N_RESP, N_FREQ)), gff=rng.uniform(size=N_FREQ),
        gxx=rng.uniform(size=(N_RESP, N_FREQ)), gfx=cplx(N_RESP, N_FREQ), hits=hits,
    )  # fmt: skip


def with_records(ps: PointSet) -> int:
    """Bytes of the body of `ps` with every hit's record (``?hits=1``)."""
    return len(codec.pack(objects.point_set_to_obj(records.point_set_from_record(1, ps), True)))


def run() -> list[Row]:
    ps = point_set(16)
    _, _, bare = encode_body(1, ps)
    sizes = {bits: with_records(point_set(bits)) for bits in (16, 24, None)}
    spectra = sum(getattr(ps, a.name).size * a.dtype.itemsize for a in ARRAYS)
    v1 = sum(getattr(ps, a.name).size * SCHEMA_DTYPES[1][a.name].itemsize for a in ARRAYS)
    shape = f"{N_RESP} responses x {N_FREQ} lines"
    hits = f"{N_HITS} hits x {1 + N_RESP} x {BLOCK}"

    def beside(n: int) -> str:
        return f"{len(bare) / 1e6:.3f} MB without records; records {(n - len(bare)) / 1e6:.3f} MB"

    return [
        ("point set as pulled (hits without records)", len(bare) / 1e6, "MB",
         f"goal <= {GOAL_MB:g} MB; {shape}"),
        ("its spectra's own bytes", spectra / 1e6, "MB",
         f"floor; {len(bare) / spectra:.3f} x of it on the wire"),
        ("with every hit's record, int16 codes", sizes[16] / 1e6, "MB",
         f"{hits} of a 16-bit converter; {beside(sizes[16])}"),
        ("with every hit's record, int32 codes", sizes[24] / 1e6, "MB",
         f"{hits} of a 24-bit converter; {beside(sizes[24])}"),
        ("with every hit's record, float32 SI", sizes[None] / 1e6, "MB",
         f"{hits} as schema 2 kept them (and a device without codes); {beside(sizes[None])}"),
        ("the same spectra in schema 1", v1 / 1e6, "MB", "float64 / complex128, before"),
    ]  # fmt: skip


def headline(rows: list[Row]) -> list[Figure]:
    bare = pick(rows, "point set as pulled")
    as_float = pick(rows, "with every hit's record, float32")
    return [Figure("bytes per point set (2 resp, 16k)", bare, "MB", "<=", GOAL_MB,
                   pick(rows, "its spectra's own bytes"), "the spectra's raw bytes"),
            # Goal: the records' part half of float32's (int16 codes, 2 bytes a sample).
            Figure("bytes per point set, int16 hits", pick(rows, "with every hit's record, int16"),
                   "MB", "<=", bare + (as_float - bare) / 2 * 1.01, bare,
                   "the point set without records")]  # fmt: skip


if __name__ == "__main__":
    show(run(), decimals=3)
