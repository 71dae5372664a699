"""The SQLite point-set store: round trips, versions, atomicity, kill -9, disk full, migrations.

Every test uses a real SQLite file under tmp_path. Facts about SQLite that the checks rely on
come from its documentation: "PRAGMA integrity_check" answers the single row "ok" for a sound
file (SQLite docs, "Pragma statements", integrity_check); SQLITE_FULL reads "database or disk
is full" and is also what `PRAGMA max_page_count` provokes (SQLite docs, "Result and Error
Codes", SQLITE_FULL; "Pragma statements", max_page_count); WAL readers and the writer do not
block each other (SQLite docs, "Write-Ahead Logging", "Concurrency"). All cited from memory.
"""

from __future__ import annotations

import dataclasses
import os
import queue
import random
import signal
import sqlite3
import struct
import subprocess
import sys
import threading
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from taprig.daemon.errors import AlreadyExists, DiskFullError, NotFound, StoreError
from taprig.daemon.records import Finding, GridPoint, PointSet, RovingMode, StoredHit
from taprig.daemon.store import Store
from taprig.daemon.store import tables as store_tables
from taprig.daemon.store import writer as store_writer
from taprig.schema import pointset

GRID = [GridPoint(f"P{i}", 0.1 * i, 0.0, 0.0) for i in range(1, 5)]
ARRAYS = ("freq_hz", "h1", "h2", "coherence", "gff", "gxx", "gfx")


def _hit_record(rng: np.random.Generator, i: int, block: int) -> tuple[np.ndarray, np.ndarray]:
    """(data, scale) of hit `i`, by turns: int16 codes, int24 codes in int32, float32 SI
    values (a device without codes) with a scale of 1.0."""
    if i % 3 == 2:
        return rng.standard_normal((3, block)).astype(np.float32), np.ones(3)
    half = 1 << (15 if i % 3 == 0 else 23)
    codes = rng.integers(-half, half, (3, block)).astype(np.int16 if i % 3 == 0 else np.int32)
    return codes, rng.uniform(1e-6, 1e-3, 3)


def make_point_set(
    test: str,
    point: str,
    seed: int,
    n_freq: int = 257,
    n_hits: int = 3,
    block: int = 512,
) -> PointSet:
    """A deterministic point set of random numbers, each array in its stored dtype (the
    table of schema.pointset); meta records how to rebuild it."""
    rng = np.random.default_rng(seed)

    def cplx(*shape: int) -> np.ndarray:
        return (rng.standard_normal(shape) + 1j * rng.standard_normal(shape)).astype("<c8")

    def real(*shape: int) -> np.ndarray:
        return rng.uniform(0, 1, shape).astype("<f4")

    hits = tuple(
        StoredHit(
            trigger_index=1000 * i + seed,
            utc=f"2025-01-01T00:00:{i:02d}.000Z",
            accepted=i % 2 == 0,
            peak_force_n=float(rng.uniform(10, 500)),
            pulse_width_s=float(rng.uniform(1e-4, 1e-3)),
            findings=(Finding("double_hit", f"second peak in hit {i}"),) if i % 2 else (),
            data=record[0],
            scale=record[1],
        )
        for i, record in enumerate(_hit_record(rng, i, block) for i in range(n_hits))
    )
    return PointSet(
        test=test,
        point=point,
        version=0,
        roving_mode=RovingMode.HAMMER,
        drive_point=point,
        response_labels=("acc1", "acc2"),
        response_points=("P1", "P2"),
        n_averages=n_hits,
        freq_hz=np.linspace(0.0, 1000.0, n_freq),
        h1=cplx(2, n_freq),
        h2=cplx(2, n_freq),
        coherence=real(2, n_freq),
        gff=real(n_freq),
        gxx=real(2, n_freq),
        gfx=cplx(2, n_freq),
        hits=hits,
        meta={"seed": seed, "n_freq": n_freq, "n_hits": n_hits, "block": block, "note": "é"},
    )


def rebuild(ps: PointSet) -> PointSet:
    m = ps.meta
    return make_point_set(ps.test, ps.point, m["seed"], m["n_freq"], m["n_hits"], m["block"])


def assert_same(got: PointSet, want: PointSet, with_data: bool = True) -> None:
    for name in ARRAYS:
        a, b = getattr(got, name), getattr(want, name)
        assert a.dtype == b.dtype, name
        assert np.array_equal(a, b), name
    assert (got.test, got.point, got.drive_point) == (want.test, want.point, want.drive_point)
    assert (got.response_labels, got.response_points) == (
        want.response_labels,
        want.response_points,
    )
    assert got.meta == want.meta
    assert len(got.hits) == len(want.hits)
    for g, w in zip(got.hits, want.hits, strict=True):
        assert (g.trigger_index, g.utc, g.accepted, g.findings) == (
            w.trigger_index,
            w.utc,
            w.accepted,
            w.findings,
        )
        assert (g.peak_force_n, g.pulse_width_s) == (w.peak_force_n, w.pulse_width_s)
        if with_data:
            assert g.data is not None and w.data is not None
            assert g.data.dtype == w.data.dtype and np.array_equal(g.data, w.data)
            assert g.scale is not None and w.scale is not None
            assert g.scale.tobytes() == np.asarray(w.scale, dtype=np.float64).tobytes()
        else:
            assert g.data is None and g.scale is None


@pytest.fixture
def store(tmp_path: Path) -> Iterator[Store]:
    with Store(tmp_path) as s:
        s.save_test("beam", GRID, RovingMode.HAMMER, "P1", 3, {"operator": "kim"})
        yield s


def test_round_trip_is_bit_identical(store: Store) -> None:
    """Arrays come back with their dtypes and every bit; hits with or without their records."""
    ps = make_point_set("beam", "P3", seed=7)
    done = store.commit_point_set(ps)
    assert done.version == 1 and done.seq == 2 and done.completed_utc
    got = store.get_point_set(store.list_point_sets("beam")[0].id, with_hits=True)
    assert_same(got, ps)
    assert (got.version, got.seq, got.completed_utc) == (1, 2, done.completed_utc)
    assert_same(store.get_point_set(newest_id(store), with_hits=False), ps, with_data=False)


def test_nan_hit_measures_round_trip(store: Store) -> None:
    """SQLite keeps no NaN in a REAL column (SQLite docs, "Datatypes In SQLite"; NaN binds as
    NULL), so the store maps it back: a hit whose pulse could not be measured keeps NaN."""
    ps = make_point_set("beam", "P1", 5)
    blank = dataclasses.replace(ps.hits[0], peak_force_n=float("nan"), pulse_width_s=float("nan"))
    store.commit_point_set(dataclasses.replace(ps, hits=(blank, *ps.hits[1:])))
    got = store.get_point_set(newest_id(store)).hits[0]
    assert np.isnan(got.peak_force_n) and np.isnan(got.pulse_width_s)


def newest_id(store: Store) -> int:
    return store.list_point_sets()[-1].id


def test_blob_layout_is_the_documented_one(store: Store) -> None:
    """The BLOB is `<4s dtype><u1 ndim><u8 × ndim shape>` + raw LE bytes, read without the store.

    Decoded with the stdlib struct module and numpy.frombuffer only (numpy docs, "Data type
    objects": "<c16" is little-endian complex128), so a client in another language can rely on it.
    """
    ps = make_point_set("beam", "P2", seed=3)
    store.commit_point_set(ps)
    with sqlite3.connect(store.path) as raw:
        blob, data = raw.execute(
            "SELECT p.h1, h.data FROM point_sets p JOIN hits h ON h.point_set_id = p.id "
            "ORDER BY h.ordinal LIMIT 1"
        ).fetchone()
    raw.close()
    for b, want in ((blob, ps.h1), (data, ps.hits[0].data)):
        assert want is not None
        code, ndim = struct.unpack_from("<4sB", b)
        shape = struct.unpack_from(f"<{ndim}Q", b, 5)
        arr = np.frombuffer(b, np.dtype(code.rstrip(b"\0").decode()), offset=5 + 8 * ndim)
        assert shape == want.shape and np.array_equal(arr.reshape(shape), want)
        assert b[5 + 8 * ndim :] == want.astype(want.dtype.newbyteorder("<")).tobytes()


def test_versions_are_kept_and_seq_grows_by_one(store: Store) -> None:
    """Same point twice → versions 1 and 2, both stored; each commit takes seq + 1."""
    seqs = [store.last_seq()]
    for point, seed in (("P1", 1), ("P1", 2)):
        seqs.append(store.commit_point_set(make_point_set("beam", point, seed)).seq)
        assert store.last_seq() == seqs[-1]
    future = store.submit_point_set(make_point_set("beam", "P2", 3))
    seqs.append(future.result(timeout=10).seq)
    assert np.diff(seqs).tolist() == [1, 1, 1]
    all_sets = store.list_point_sets("beam")
    assert [(s.point, s.version) for s in all_sets] == [("P1", 1), ("P1", 2), ("P2", 1)]
    assert_same(
        store.get_point_set(all_sets[0].id, with_hits=True), make_point_set("beam", "P1", 1)
    )
    latest = store.list_point_sets(latest_only=True)
    assert [(s.point, s.version) for s in latest] == [("P1", 2), ("P2", 1)]
    assert [s.seq for s in store.list_point_sets(since_seq=seqs[2])] == [seqs[3]]
    feed = store.changes(0, limit=10)
    assert [(c.kind, c.seq) for c in feed] == [("test", 1)] + [("point_set", s) for s in seqs[1:]]
    assert [c.point_set_id for c in feed[1:]] == [s.id for s in all_sets]
    assert [c.seq for c in store.changes(seqs[1], limit=1)] == [seqs[2]]


def test_seq_is_never_reused_after_a_delete(store: Store) -> None:
    """Deleting the newest point set (by hand) does not hand its seq out again."""
    seq = store.commit_point_set(make_point_set("beam", "P1", 1)).seq
    with sqlite3.connect(store.path) as raw:
        raw.execute("PRAGMA foreign_keys = ON")
        raw.execute("DELETE FROM point_sets WHERE seq = ?", (seq,))
    raw.close()
    assert store.stats().hits == 0
    assert store.commit_point_set(make_point_set("beam", "P1", 2)).seq == seq + 1
    store.save_test("plate", GRID, "sensor", "P2", 1, {})
    assert store.get_test("plate").seq == seq + 2


def _bad_third_hit(ps: PointSet, monkeypatch: pytest.MonkeyPatch) -> PointSet:
    hits = list(ps.hits)
    hits[2] = StoredHit(1, "x", True, 1.0, 1.0, (), np.zeros((3, 8), dtype=np.complex64))
    return dataclasses.replace(ps, hits=tuple(hits))


def _insert_fails_after_two_hits(ps: PointSet, monkeypatch: pytest.MonkeyPatch) -> PointSet:
    real = store_writer._hit_rows

    def failing(point_set_id: int, hits: Any) -> Any:
        rows = real(point_set_id, hits)
        yield next(rows)
        yield next(rows)
        raise sqlite3.IntegrityError("injected failure after two hit rows")

    monkeypatch.setattr(store_writer, "_hit_rows", failing)
    return ps


@pytest.mark.parametrize("inject", [_bad_third_hit, _insert_fails_after_two_hits])
def test_failed_commit_leaves_nothing_behind(
    store: Store, monkeypatch: pytest.MonkeyPatch, inject: Any
) -> None:
    """A failure after the point-set row and two hit rows were written rolls all of it back."""
    first = make_point_set("beam", "P1", 1)
    store.commit_point_set(first)
    before = (store.last_seq(), store.stats())
    with pytest.raises(StoreError) as err:
        store.commit_point_set(inject(make_point_set("beam", "P1", 2), monkeypatch))
    assert not isinstance(err.value, DiskFullError)
    assert "hit" in str(err.value)
    assert (store.last_seq(), store.stats()) == before
    assert [(s.point, s.version) for s in store.list_point_sets()] == [("P1", 1)]
    assert_same(store.get_point_set(newest_id(store), with_hits=True), first)
    monkeypatch.undo()
    assert store.commit_point_set(make_point_set("beam", "P1", 3)).seq == before[0] + 1


def test_unknown_test_point_or_bad_shape_is_refused(store: Store) -> None:
    with pytest.raises(StoreError, match="no test named 'nope'"):
        store.commit_point_set(make_point_set("nope", "P1", 1))
    with pytest.raises(StoreError, match="'P9' is not in the grid"):
        store.commit_point_set(make_point_set("beam", "P9", 1))
    ps = make_point_set("beam", "P1", 1)
    with pytest.raises(StoreError, match=r"'P1': h2\.shape: \[2, 3\] does not fit 2 responses"):
        store.commit_point_set(dataclasses.replace(ps, h2=np.zeros((2, 3), complex)))
    with pytest.raises(StoreError, match="response_points: 1 entries for 2 response labels"):
        store.commit_point_set(dataclasses.replace(ps, response_points=("P1",)))
    with pytest.raises(StoreError, match="meta of point set 'P1' is not plain JSON"):
        store.commit_point_set(dataclasses.replace(ps, meta={"gain": {1, 2}}))
    assert store.last_seq() == 1 and store.stats().point_sets == 0


def test_columns_follow_the_declared_point_set(store: Store) -> None:
    """Every array of schema.pointset has its column in point_sets, every plain field of a
    point set and of a hit has its column, and a committed point set reads back with every
    array in its declared dtype."""
    conn = sqlite3.connect(store.path)
    try:
        ps_cols = {r[1] for r in conn.execute("PRAGMA table_info(point_sets)")}
        hit_cols = {r[1] for r in conn.execute("PRAGMA table_info(hits)")}
    finally:
        conn.close()
    assert {a.column for a in pointset.ARRAYS} <= ps_cols
    assert set(pointset.SCALARS) - {"test"} <= ps_cols
    hit_arrays = {pointset.HIT_DATA.column, pointset.HIT_SCALE.column}
    assert {*pointset.HIT_SCALARS, "findings", *hit_arrays} <= hit_cols
    stored = store.commit_point_set(make_point_set("beam", "P1", 1))
    pid = store.list_point_sets()[-1].id
    back = store.get_point_set(pid, with_hits=True)
    for a in pointset.ARRAYS:
        assert getattr(back, a.name).dtype == a.dtype, a.name
        assert getattr(back, a.name).shape == np.shape(getattr(stored, a.name)), a.name
    for h, was in zip(back.hits, stored.hits, strict=True):
        assert h.data is not None and was.data is not None and h.data.dtype == was.data.dtype
        assert h.scale is not None and h.scale.dtype == pointset.HIT_SCALE.dtype


def test_readers_see_whole_point_sets_while_commits_run(store: Store) -> None:
    """Two reader threads loop while 50 point sets are committed; each one seen is complete."""
    stop = threading.Event()
    problems: list[str] = []
    reads = [0, 0]

    def reader(slot: int) -> None:
        while not stop.is_set():
            for summary in store.list_point_sets("beam"):
                ps = store.get_point_set(summary.id, with_hits=slot == 0)
                if len(ps.hits) != ps.meta["n_hits"] or ps.h1.shape != (2, ps.meta["n_freq"]):
                    problems.append(f"{summary}: {len(ps.hits)} hits, h1 {ps.h1.shape}")
                reads[slot] += 1

    threads = [threading.Thread(target=reader, args=(i,)) for i in range(2)]
    for t in threads:
        t.start()
    try:
        for i in range(50):
            ps = make_point_set("beam", f"P{i % 4 + 1}", seed=i, n_hits=1 + i % 5, n_freq=65)
            store.commit_point_set(ps)
    finally:
        stop.set()
        for t in threads:
            t.join(timeout=10)
    assert not problems, problems[:3]
    assert min(reads) > 0 and store.stats().point_sets == 50


def test_open_read_transaction_does_not_block_the_writer(tmp_path: Path) -> None:
    with Store(tmp_path, timeout_s=5.0) as s:
        s.save_test("beam", GRID, "hammer", "P1", 1, {})
        holder = sqlite3.connect(s.path, isolation_level=None)
        holder.execute("BEGIN")
        holder.execute("SELECT COUNT(*) FROM tests").fetchone()
        try:
            seq = s.commit_point_set(make_point_set("beam", "P1", 1)).seq
            # The old snapshot is still what the open reader sees.
            assert holder.execute("SELECT COUNT(*) FROM point_sets").fetchone() == (0,)
        finally:
            holder.close()
        assert seq == 2 and s.stats().point_sets == 1


CHILD = """
import importlib.util, sys
spec = importlib.util.spec_from_file_location("store_child_helpers", sys.argv[1])
helpers = importlib.util.module_from_spec(spec)
spec.loader.exec_module(helpers)
from taprig.daemon.store import Store
store = Store(sys.argv[2])
base = int(sys.argv[3])
for i in range(10**6):
    ps = helpers.make_point_set("kill", "P%d" % (i % 4 + 1), base + i, 2049, 3, 8192)
    print(store.commit_point_set(ps).seq, flush=True)
"""


def _lines(proc: subprocess.Popen[str], out: queue.Queue[str | None]) -> None:
    assert proc.stdout is not None
    for line in proc.stdout:
        out.put(line)
    out.put(None)


def _seqs_printed_before_kill(data_dir: Path, base: int, wanted: int) -> list[int]:
    """Run the committing child until it printed `wanted` seqs, SIGKILL it, return them."""
    proc = subprocess.Popen(
        [sys.executable, "-c", CHILD, __file__, str(data_dir), str(base)],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    lines: queue.Queue[str | None] = queue.Queue()
    pump = threading.Thread(target=_lines, args=(proc, lines))
    pump.start()
    seqs: list[int] = []
    deadline = time.monotonic() + 15.0
    try:
        while len(seqs) < wanted:
            line = lines.get(timeout=max(0.01, deadline - time.monotonic()))
            assert line is not None, f"child ended early: {proc.stderr and proc.stderr.read()}"
            seqs.append(int(line))
    finally:
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(timeout=10)
        pump.join(timeout=10)
        for stream in (proc.stdout, proc.stderr):
            if stream is not None:
                stream.close()
    # A last line the child finished printing just before the kill counts too.
    while (line := lines.get_nowait()) is not None:
        if line.endswith("\n"):
            seqs.append(int(line))
    return seqs


def test_survives_kill_9_mid_commit(tmp_path: Path) -> None:
    """A child commits in a loop and is SIGKILLed 5 times; every returned commit survives whole.

    Checks SQLite's crash promise for WAL with synchronous=FULL (SQLite docs, "Pragma
    statements", synchronous; "Atomic Commit In SQLite"; paraphrased from memory: a transaction
    is durable once COMMIT returns and is never seen half-done). Seeded so a failure replays.
    """
    with Store(tmp_path) as s:
        s.save_test("kill", GRID, "hammer", "P1", 3, {})
    rng = random.Random(20250101)
    printed: list[int] = []
    for round_ in range(5):
        printed += _seqs_printed_before_kill(tmp_path, 1000 * round_, rng.randint(1, 5))
        with Store(tmp_path) as s:
            assert s.integrity_check() == "ok"
            stored = {p.seq: p for p in s.list_point_sets("kill")}
            assert set(printed) <= set(stored), f"round {round_}: lost {set(printed) - set(stored)}"
            for summary in stored.values():
                ps = s.get_point_set(summary.id, with_hits=True)
                assert_same(ps, rebuild(ps))
            assert s.last_seq() == max(stored)


def test_disk_full_is_clear_keeps_data_and_recovers(tmp_path: Path) -> None:
    """SQLITE_FULL ("database or disk is full") → DiskFullError; old data intact; then resumes."""
    first = make_point_set("beam", "P1", 1)
    with Store(tmp_path) as s:
        s.save_test("beam", GRID, "hammer", "P1", 3, {})
        s.commit_point_set(first)
        pages = _page_count(s.path) + 3  # room for a few pages, not for a point set
    with Store(tmp_path, max_pages=pages) as s:
        before = (s.last_seq(), s.stats().point_sets, s.stats().hits)
        with pytest.raises(DiskFullError) as err:
            s.commit_point_set(make_point_set("beam", "P2", 2, n_freq=4097, block=8192))
        assert "database or disk is full" in str(err.value) and str(s.path) in str(err.value)
        assert "nothing" in str(err.value)
        assert (s.last_seq(), s.stats().point_sets, s.stats().hits) == before
        assert s.integrity_check() == "ok"
        assert_same(s.get_point_set(newest_id(s), with_hits=True), first)
        s.set_max_pages(1_000_000)
        done = s.commit_point_set(make_point_set("beam", "P2", 2, n_freq=4097, block=8192))
        assert done.seq == before[0] + 1


def _page_count(path: Path) -> int:
    with sqlite3.connect(path) as raw:
        n = int(raw.execute("PRAGMA page_count").fetchone()[0])
    raw.close()
    return n


def _raw_db(path: Path, *sql: str) -> None:
    raw = sqlite3.connect(path)
    for statement in sql:
        raw.execute(statement)
    raw.commit()
    raw.close()


def _user_version(path: Path) -> int:
    raw = sqlite3.connect(path)
    version = int(raw.execute("PRAGMA user_version").fetchone()[0])
    raw.close()
    return version


def test_version_0_database_is_migrated(tmp_path: Path) -> None:
    path = tmp_path / store_tables.FILE_NAME
    _raw_db(path, "CREATE TABLE notes (t TEXT)", "INSERT INTO notes VALUES ('kept')")
    assert _user_version(path) == 0
    with Store(tmp_path) as s:
        assert s.stats().schema_version == len(store_tables.MIGRATIONS) == 3
        assert s.last_seq() == 0 and s.list_tests() == []
    raw = sqlite3.connect(path)
    assert raw.execute("SELECT t FROM notes").fetchall() == [("kept",)]
    assert raw.execute("PRAGMA journal_mode").fetchone() == ("wal",)
    raw.close()


def test_failed_migration_is_rolled_back(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    Store(tmp_path).close()

    def bad(conn: sqlite3.Connection) -> None:
        conn.execute("CREATE TABLE half_done (x)")
        raise sqlite3.OperationalError("injected migration failure")

    monkeypatch.setattr(store_tables, "MIGRATIONS", [*store_tables.MIGRATIONS, bad])
    with pytest.raises(StoreError, match="injected migration failure"):
        Store(tmp_path)
    path = tmp_path / store_tables.FILE_NAME
    known = len(store_tables.MIGRATIONS) - 1  # every migration but the failing one
    assert _user_version(path) == known
    raw = sqlite3.connect(path)
    assert raw.execute("SELECT name FROM sqlite_master WHERE name = 'half_done'").fetchall() == []
    raw.close()
    monkeypatch.setattr(
        store_tables,
        "MIGRATIONS",
        [*store_tables.MIGRATIONS[:known], lambda c: c.execute("CREATE TABLE later (x)")],
    )
    Store(tmp_path).close()
    assert _user_version(path) == known + 1


def test_newer_database_is_refused_untouched(tmp_path: Path) -> None:
    path = tmp_path / store_tables.FILE_NAME
    _raw_db(path, "PRAGMA user_version = 99")
    with pytest.raises(StoreError) as err:
        Store(tmp_path)
    known = f"version {len(store_tables.MIGRATIONS)}"
    assert "99" in str(err.value) and known in str(err.value) and str(path) in str(err.value)
    assert _user_version(path) == 99


def test_non_sqlite_file_is_refused(tmp_path: Path) -> None:
    path = tmp_path / store_tables.FILE_NAME
    path.write_bytes(b"this is a CSV export, not a database\n" * 200)
    with pytest.raises(StoreError, match="not an SQLite database") as err:
        Store(tmp_path)
    assert str(path) in str(err.value)


def test_tests_round_trip_and_feed(tmp_path: Path) -> None:
    with Store(tmp_path) as s:
        s.save_test("beam", GRID, "hammer", "P1", 3, {"sensor_points": {"acc1": "P1"}})
        s.save_test("plate", GRID[::-1], RovingMode.SENSOR, "P4", 5, {})
        plan = s.get_test("beam")
        assert plan.grid == tuple(GRID) and plan.roving_mode is RovingMode.HAMMER
        assert (plan.reference, plan.averages, plan.seq) == ("P1", 3, 1)
        assert plan.meta == {"sensor_points": {"acc1": "P1"}} and plan.created_utc.endswith("Z")
        assert [t.name for t in s.list_tests()] == ["beam", "plate"]
        assert s.list_tests()[1].grid == tuple(GRID[::-1])
        assert [(c.kind, c.test, c.seq) for c in s.changes(0, 10)] == [
            ("test", "beam", 1),
            ("test", "plate", 2),
        ]
        with pytest.raises(AlreadyExists, match="already exists"):
            s.save_test("beam", GRID, "hammer", "P1", 3, {})
        with pytest.raises(StoreError, match="reference 'P7'"):
            s.save_test("bar", GRID, "sensor", "P7", 3, {})  # the hammer point: on the grid
        with pytest.raises(NotFound, match="no test named 'bar'"):
            s.get_test("bar")
        assert s.last_seq() == 2


def test_close_is_idempotent_and_final(tmp_path: Path) -> None:
    s = Store(tmp_path)
    s.close()
    s.close()
    with pytest.raises(StoreError, match="closed"):
        s.last_seq()
    with pytest.raises(StoreError, match="closed"):
        s.save_test("beam", GRID, "hammer", "P1", 3, {})


def test_wire_body_is_written_with_the_point_set(tmp_path: Path) -> None:
    """The body stored at commit decodes (schema.objects) to exactly the stored arrays, and its
    digest is the SHA-256 of its bytes (RFC 9530 §2; hashlib as the reference)."""
    import base64
    import hashlib

    from taprig.daemon.wirebody import encode_body
    from taprig.schema import codec, objects, records

    with Store(tmp_path, body_encoder=encode_body) as s:
        s.save_test("beam", GRID, RovingMode.HAMMER, "P1", 3, {})
        s.commit_point_set(make_point_set("beam", "P3", seed=9))
        pid = newest_id(s)
        stored = s.get_wire_body(pid, records.SCHEMA_VERSION)
        assert stored is not None and s.get_wire_body(pid, records.SCHEMA_VERSION + 1) is None
        digest, body = stored
        sha = base64.b64encode(hashlib.sha256(body).digest()).decode()
        assert digest == f"sha-256=:{sha}:"
        got = objects.point_set_from_obj(codec.unpack(body, max_bytes=1 << 26))
        ref = s.get_point_set(pid)
        for name in ("freq_hz", "h1", "h2", "coherence", "gff", "gxx", "gfx"):
            a, b = getattr(got, name), getattr(ref, name)
            assert a.dtype == b.dtype and a.tobytes() == b.tobytes(), name
        assert got.id == pid and got.seq == ref.seq and got.version == ref.version


def test_failing_body_encoder_keeps_nothing(tmp_path: Path) -> None:
    def broken(pid: int, ps: object) -> tuple[int, str, bytes]:
        raise StoreError("injected encoder failure")

    with Store(tmp_path, body_encoder=broken) as s:
        s.save_test("beam", GRID, RovingMode.HAMMER, "P1", 3, {})
        seq = s.last_seq()
        with pytest.raises(StoreError, match="injected encoder failure"):
            s.commit_point_set(make_point_set("beam", "P3", seed=1))
        assert s.list_point_sets() == [] and s.last_seq() == seq


def test_a_roving_hammer_reference_may_sit_off_the_grid(tmp_path: Path) -> None:
    """Roving hammer: the reference is where the first sensor sits ("x,y,z" m off the grid,
    "" while unknown); roving sensor: it is the struck point, so it must be on the grid."""
    with Store(tmp_path) as s:
        s.save_test("off", GRID, "hammer", "0.45,0.1,0", 3, {})
        s.save_test("unknown", GRID, "hammer", "", 3, {})
        assert s.get_test("off").reference == "0.45,0.1,0" and s.get_test("unknown").reference == ""
