"""Bytes per point set: what a pull carries for 2 responses and a 16k block.

A point set as the rig commits it (2 responses, a block of 16,384 samples, so 8,193 lines;
5 hits of 3 channels, 4 counted and 1 rejected), encoded by the daemon's own encoder: the
body stored at commit (what a pull takes by default, hits without records) and the body with
every hit's record (``?hits=1``). Printed beside them: the spectra's own bytes (the arrays'
raw bytes, the floor any encoding must carry), the same arrays' bytes in schema 1 (float64 /
complex128), and the goal of 1 MB.

Run: python tests/bench/bench_size.py
"""

from __future__ import annotations

import numpy as np
from table import Figure, Row, pick, show

from taprig.daemon.records import Finding, PointSet, RovingMode, StoredHit
from taprig.daemon.wirebody import encode_body
from taprig.schema import codec, objects, records
from taprig.schema.pointset import ARRAYS, SCHEMA_DTYPES

N_RESP = 2
BLOCK = 16_384
N_FREQ = BLOCK // 2 + 1
N_HITS = 5
GOAL_MB = 1.0


def point_set() -> PointSet:
    """Random spectra and hit records of the benchmark's shape (float64, as computed)."""
    rng = np.random.default_rng(14)

    def cplx(*shape: int) -> np.ndarray:
        return rng.standard_normal(shape) + 1j * rng.standard_normal(shape)

    hits = tuple(
        StoredHit(4096 * i, f"2026-12-03T10:00:{i:02d}.000Z", i < 4, 40.0 + i, 8e-4,
                  () if i < 4 else (Finding("double_hit", "a second pulse"),),
                  rng.standard_normal((1 + N_RESP, BLOCK)).astype(np.float32))
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


def run() -> list[Row]:
    ps = point_set()
    _, _, bare = encode_body(1, ps)
    full = codec.pack(objects.point_set_to_obj(records.point_set_from_record(1, ps), True))
    spectra = sum(getattr(ps, a.name).size * a.dtype.itemsize for a in ARRAYS)
    v1 = sum(getattr(ps, a.name).size * SCHEMA_DTYPES[1][a.name].itemsize for a in ARRAYS)
    raw_hits = sum(h.data.nbytes for h in ps.hits if h.data is not None)
    shape = f"{N_RESP} responses x {N_FREQ} lines"
    return [
        ("point set as pulled (hits without records)", len(bare) / 1e6, "MB",
         f"goal <= {GOAL_MB:g} MB; {shape}"),
        ("its spectra's own bytes", spectra / 1e6, "MB",
         f"floor; {len(bare) / spectra:.3f} x of it on the wire"),
        ("point set with every hit's record", len(full) / 1e6, "MB",
         f"{N_HITS} hits x {1 + N_RESP} x {BLOCK} float32 = {raw_hits / 1e6:.2f} MB of them"),
        ("the same spectra in schema 1", v1 / 1e6, "MB", "float64 / complex128, before"),
    ]  # fmt: skip


def headline(rows: list[Row]) -> list[Figure]:
    return [Figure("bytes per point set (2 resp, 16k)", pick(rows, "point set as pulled"),
                   "MB", "<=", GOAL_MB, pick(rows, "its spectra's own bytes"),
                   "the spectra's raw bytes")]  # fmt: skip


if __name__ == "__main__":
    show(run(), decimals=3)
