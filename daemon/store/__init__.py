"""The durable store of tests and completed point sets: one SQLite file per data directory.

`<data_dir>/taprig.sqlite3`, WAL journal, synchronous=FULL, foreign keys on. One writer
thread owns the only write connection and takes jobs from a queue; every commit is one
transaction, so a point set is stored whole or not at all, also across power loss or kill -9.
Reads open their own connection per call and see a committed snapshot (WAL: readers never
block the writer, nor the writer them).

Change sequence: every committed test and every committed point set takes the next number of
one store-wide sequence (`store_meta.last_seq`, bumped in the same transaction), so a client
that asks for `changes(since_seq)` learns of new tests and of new point sets in commit order.
Numbers are never reused, not even after rows are deleted.

Arrays are BLOBs: a header `<4s dtype (e.g. b"<c16", NUL-padded)><u1 ndim><ndim × u8 shape>`
followed by the raw little-endian C-order bytes. The schema version is `PRAGMA user_version`;
`MIGRATIONS[i]` brings a database from version i to i + 1 inside one transaction.

The folder in the order a commit goes: tables.py (the file's tables and migrations),
entries.py (tests, changes, stats as handed back), blobs.py (arrays as BLOBs), rows.py
(rows ↔ records), reads.py (snapshots on per-thread readers), writer.py (`Store`: the
writer thread, saving tests, committing point sets).
"""

from .blobs import decode_array, encode_array
from .entries import BodyEncoder, Change, StoreStats, TestPlan
from .reads import MMAP_BYTES, peek_stats
from .tables import FILE_NAME, MIGRATIONS, PAGE_SIZE, Migration
from .writer import DEFAULT_TIMEOUT_S, Store

__all__ = [
    "DEFAULT_TIMEOUT_S",
    "FILE_NAME",
    "MIGRATIONS",
    "MMAP_BYTES",
    "PAGE_SIZE",
    "BodyEncoder",
    "Change",
    "Migration",
    "Store",
    "StoreStats",
    "TestPlan",
    "decode_array",
    "encode_array",
    "peek_stats",
]
