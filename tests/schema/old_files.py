"""A rig's store and a workstation's mirror as written by schema version 1 (December 2026).

Schema 1 kept spectra as float64 / complex128 and hit records as float32 SI values. The two
SQLite files in `golden/v1/` were written by this module (``python tests/schema/old_files.py
--write``) with the code of schema 1, *before* the format changed, and are committed: newer
code must open them and read what they hold (`tests/schema/test_old_files.py`). Never rewrite
them with newer code; they stand for files already on rigs and workstations.

Contents: one test "bracket-2026" (grid A1, D2) and one point set of it at D2 (2 responses,
9 lines, 2 hits with their records), the fixed values of `golden.wire_point_set`.
"""

from __future__ import annotations

import dataclasses
import sqlite3
import sys
import tempfile
from pathlib import Path

from taprig.daemon.records import Finding, GridPoint, PointSet, RovingMode, StoredHit
from taprig.schema.pointset import field_values

from .golden import OLD, schema_2_hit_data, wire_point_set

STORE = OLD / "store.sqlite3"
MIRROR = OLD / "mirror.sqlite3"
TEST = "bracket-2026"
GRID = (GridPoint("A1", 0.0, 0.0, 0.0), GridPoint("D2", 0.125, -0.25, 0.5, "-x"))
RIG_ID = "0f3c6a52-1d1e-4d43-9a4e-2b6f8d1e7c01"


def stored_point_set() -> PointSet:
    """The daemon's record of `golden.wire_point_set()`, hits with their records (float32
    SI values then, `golden.schema_2_hit_data`)."""
    w = wire_point_set()
    hits = tuple(
        StoredHit(h.trigger_index, h.utc, h.accepted, h.peak_force_n, h.pulse_width_s,
                  tuple(Finding(c, m) for c, m in h.findings), schema_2_hit_data(i))
        for i, h in enumerate(w.hits)
    )  # fmt: skip
    values = {**field_values(w), "roving_mode": RovingMode.HAMMER, "version": 0, "seq": 0}
    return PointSet(**values, hits=hits)


def _compact(path: Path) -> None:
    """Small pages and no WAL, so the committed file is a few kB (the store's 64 KiB pages
    would make it half a megabyte). Page size and journal mode are not part of the format."""
    conn = sqlite3.connect(path, isolation_level=None)
    try:
        conn.execute("PRAGMA journal_mode = DELETE")
        conn.execute("PRAGMA page_size = 4096")
        conn.execute("VACUUM")
    finally:
        conn.close()


def write() -> None:
    """Write both files with the code of schema 1 (run only with that code)."""
    from taprig.client.mirror import Mirror, MirroredPointSet
    from taprig.daemon.store import Store
    from taprig.daemon.wirebody import encode_body
    from taprig.schema import records

    assert records.SCHEMA_VERSION == 1, "these files stand for schema 1; do not rewrite them"
    with tempfile.TemporaryDirectory() as tmp:
        with Store(tmp, body_encoder=encode_body) as store:
            store.save_test(TEST, GRID, RovingMode.HAMMER, "A1", 2, {"site": "bay 2"})
            done = store.commit_point_set(stored_point_set())
            (summary,) = store.list_point_sets()
            digest, body = store.get_wire_body(summary.id, 1) or ("", b"")
            plan = store.get_test(TEST)
        STORE.unlink(missing_ok=True)
        Path(tmp, "taprig.sqlite3").replace(STORE)
    _compact(STORE)
    MIRROR.unlink(missing_ok=True)
    with Mirror(MIRROR) as mirror:
        mirror.bind(RIG_ID, "bay-2-rig", "http://192.0.2.7:8750")
        with mirror.transaction():
            mirror.put_test(records.test_from_record(plan))
            mirror.put_point_set(MirroredPointSet(summary, digest, body))
            mirror.set_cursor(done.seq)
    _compact(MIRROR)
    print(dataclasses.replace(summary), len(body), "bytes of body")


if __name__ == "__main__":
    if sys.argv[1:] != ["--write"]:
        sys.exit("usage: python -m tests.schema.old_files --write  (schema 1 code only)")
    write()
