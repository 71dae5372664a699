"""The PostgreSQL archive: follower throughput from many rigs, and reading one test back.

1. `rigs` simulated rigs × `sets` point sets (2 responses × 2049 lines, about 0.16 MB each)
   into one empty archive: the rigs are real services on loopback in a process of their own
   (archive_rigs.py); the follower is `Archiver` (one thread per rig, one transaction per
   point set, bodies verified and decoded before they are stored). Ceiling, on the same
   server in the same run: PostgreSQL `COPY ... FROM STDIN (FORMAT BINARY)` of the same
   bodies into a table of the same layout, one COPY per rig, the median of three runs (other
   work on a shared machine moves a single COPY by a factor of two). Goal: at least 0.5 of it.
2. Listing and loading one test (50 points of that size) from an archive of `rows` point
   sets: the other rows are synthetic, written by COPY (20 rigs, tests of 50 points, each
   row a real but small body of 2 × 17 lines, the same bytes in every row, never loaded).
   Timed: a new connection (SCRAM password, schema check), `find(name=...)`, `load(test)`
   → TestData; median of 7. Goal: <= 200 ms.

The server is a fresh cluster (tests/client/archive/pg.py) with fsync on, in /tmp. On one
machine the simulated rigs, the follower and the server share its cores, so the CPU seconds
of the follower's process and of the rigs' (their process and its children, the rigs' device
links) are printed too.

Run: python tests/bench/bench_archive.py [--rigs 20] [--sets 200] [--rows 100000]
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import psycopg
from table import Figure, Row, pick, show

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from client.archive.conftest import commit_sets, config, serve_rig
from client.archive.pg import PgServer, cluster_folder

from taprig.client.archive import Archive, Archiver
from taprig.client.archive.config import ArchiveConfig, RigSource
from taprig.client.archive.db import migrate
from taprig.client.mirror import Mirror
from taprig.client.pull import pull
from taprig.client.remote import RigClient
from taprig.daemon.records import PointSet, RovingMode
from taprig.daemon.wirebody import encode_body

GOAL_RATIO = 0.5
COPY_RUNS = 3  # the ceiling is the median of this many COPYs of the archived bytes
LOAD_GOAL_MS = 200.0
LINES = 2049
POINTS_PER_TEST = 50


def _count(dsn: str) -> int:
    with psycopg.connect(dsn) as conn:
        row = conn.execute("SELECT count(*) FROM point_sets").fetchone()
    return int(row[0]) if row else 0


def cpu_seconds(pid: int) -> float:
    """User + system CPU seconds of a process so far (/proc/<pid>/stat, fields 14 and 15)."""
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def tree_cpu_seconds(pid: int) -> float:
    """CPU seconds of a process and of its living descendants (each rig's device link runs in
    a child process of its own)."""
    parents: dict[int, int] = {}
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            parents[int(stat.parent.name)] = int(stat.read_text().rsplit(")", 1)[1].split()[1])
        except (OSError, ValueError, IndexError):
            continue  # a process that ended meanwhile
    tree, grew = {pid}, True
    while grew:
        more = {child for child, parent in parents.items() if parent in tree} - tree
        tree |= more
        grew = bool(more)
    total = 0.0
    for member in tree:
        try:
            total += cpu_seconds(member)
        except OSError:
            continue
    return total


def follow_rigs(pg: PgServer, rigs: int, sets: int) -> tuple[float, int, list[float], float, float]:
    """(follower MB/s, bytes, COPY MB/s of the same bytes in each of COPY_RUNS runs, CPU
    seconds of the follower's process and of the rigs' processes while following).

    The end is seen in the follower's own counts, not by asking the server: a poll that
    opened a connection (SCRAM password, a new backend) every 50 ms cost the server and this
    process several CPU seconds of the run, work no follower does and the COPY never paid."""
    dsn = pg.database("bench_follow")
    migrate(dsn)
    with tempfile.TemporaryDirectory() as tmp:
        helper = subprocess.Popen(
            [sys.executable, str(Path(__file__).with_name("archive_rigs.py")), "--rigs",
             str(rigs), "--sets", str(sets), "--lines", str(LINES), "--folder", tmp],
            stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True,
        )  # fmt: skip
        try:
            assert helper.stdout is not None
            listed = json.loads(helper.stdout.readline())["rigs"]
            sources = tuple(
                RigSource(r["url"], r["token"], f"sim-{k}") for k, r in enumerate(listed)
            )
            archiver = Archiver(ArchiveConfig(dsn, sources, 0.5, 0.2))
            rigs_cpu, own_cpu = tree_cpu_seconds(helper.pid), time.process_time()
            t0 = time.perf_counter()
            archiver.start()
            try:
                # `stored` counts commits the server has answered: the point sets are in.
                while sum(r.state.stored for r in archiver.rigs) < rigs * sets:
                    time.sleep(0.05)
                seconds = time.perf_counter() - t0
                own_cpu = time.process_time() - own_cpu
                rigs_cpu = tree_cpu_seconds(helper.pid) - rigs_cpu
            finally:
                archiver.stop()
        finally:
            assert helper.stdin is not None
            helper.stdin.close()
            helper.wait(120)
    assert _count(dsn) == rigs * sets
    total = sum(r.state.bytes for r in archiver.rigs)
    copies = [copy_ceiling(dsn) for _ in range(COPY_RUNS)]
    return total / seconds / 1e6, total, copies, own_cpu, rigs_cpu


def copy_ceiling(dsn: str) -> float:
    """MB/s of COPY (binary) of the archived bodies into a new table of the same layout, one
    COPY (one transaction) per rig; only the COPYs are timed, not reading the bytes back."""
    seconds, total = 0.0, 0
    with psycopg.connect(dsn, autocommit=True) as conn:
        conn.execute("DROP TABLE IF EXISTS copy_ceiling")
        conn.execute("CREATE TABLE copy_ceiling (rig_id text, id bigint, digest text, "
                     "body bytea, PRIMARY KEY (rig_id, id))")  # fmt: skip
        conn.execute("ALTER TABLE copy_ceiling ALTER COLUMN body SET STORAGE EXTERNAL")
        rig_ids = [r[0] for r in conn.execute("SELECT rig_id FROM rigs").fetchall()]
        for rig_id in rig_ids:
            rows = conn.cursor(binary=True).execute(
                "SELECT rig_id, id, digest, body FROM point_sets WHERE rig_id = %s", (rig_id,)
            ).fetchall()  # fmt: skip
            t0 = time.perf_counter()
            with conn.transaction(), conn.cursor() as cur, cur.copy(
                "COPY copy_ceiling FROM STDIN (FORMAT BINARY)"
            ) as copy:  # fmt: skip
                copy.set_types(["text", "int8", "text", "bytea"])
                for row in rows:
                    copy.write_row(row)
            seconds += time.perf_counter() - t0
            total += sum(len(r[3]) for r in rows)
    return total / seconds / 1e6


def big_archive(pg: PgServer, rows: int) -> tuple[float, float, float, float, int]:
    """Median ms of: open, find and load one test; of the open alone (connect with a SCRAM
    password, schema check); of the find alone; of loading the same test from a mirror of the
    rig (SQLite, the same decoding and stacking); and the rows in the archive."""
    dsn = pg.database("bench_read")
    migrate(dsn)
    with tempfile.TemporaryDirectory() as tmp:
        rig = serve_rig(Path(tmp) / "rig", "target-rig")
        try:
            commit_sets(rig.running, "target-test", POINTS_PER_TEST, n_freq=LINES)
            archiver = Archiver(config(dsn, [rig]), once=True).start()
            assert archiver.wait(300)
            with RigClient(rig.url, rig.token) as client, Mirror(Path(tmp) / "m.sqlite3") as m:
                pull(client, m)
                mirror_ms = statistics.median(
                    _timed(lambda: m.load("target-test")) for _ in range(7)
                )
        finally:
            rig.loop.close()
            rig.running.close()
    _bulk(dsn, rows - POINTS_PER_TEST)
    assert _count(dsn) == rows
    total, opening, listing = [], [], []
    for _ in range(7):
        t0 = time.perf_counter()
        with Archive(dsn) as archive:
            t1 = time.perf_counter()
            (found,) = archive.find(name="target-test")
            t2 = time.perf_counter()
            data = archive.load(found.test)
        total.append(time.perf_counter() - t0)
        opening.append(t1 - t0)
        listing.append(t2 - t1)
        assert data.h1.shape == (POINTS_PER_TEST, 2, LINES)
    ms = [statistics.median(x) * 1e3 for x in (total, opening, listing)]
    return ms[0], ms[1], ms[2], mirror_ms, rows


def _timed(work: Callable[[], object]) -> float:
    t0 = time.perf_counter()
    work()
    return (time.perf_counter() - t0) * 1e3


def _bulk(dsn: str, n: int) -> None:
    """`n` synthetic point-set rows by COPY: 20 rigs, tests of 50 points, one small body."""
    freq = np.linspace(0.0, 100.0, 17)
    h = np.ones((2, 17), dtype=np.complex128)
    ps = PointSet(test="bulk", point="P0", version=1, roving_mode=RovingMode.HAMMER,
                  drive_point="P0", response_labels=("a", "b"), response_points=("P0", "P0"),
                  n_averages=3, freq_hz=freq, h1=h, h2=h, coherence=np.ones((2, 17)),
                  gff=np.ones(17), gxx=np.ones((2, 17)), gfx=h, hits=(), meta={})  # fmt: skip
    _v, digest, body = encode_body(1, ps)
    tests = -(-n // POINTS_PER_TEST)
    grid = json.dumps({"grid": []})
    with psycopg.connect(dsn, autocommit=True) as conn:
        with conn.cursor() as cur, cur.copy("COPY rigs (rig_id, name, url) FROM STDIN") as copy:
            for r in range(20):
                copy.write_row((f"bulk{r:02d}", f"bulk-rig-{r}", "http://192.0.2.1:8470"))
        with conn.cursor() as cur, cur.copy(
            "COPY tests (rig_id, name, part, seq, created_utc, roving_mode, reference, averages, "
            "grid_points, body) FROM STDIN"
        ) as copy:  # fmt: skip
            for t in range(tests):
                copy.write_row((f"bulk{t % 20:02d}", f"part-{t % 37}-{t:06d}", f"part-{t % 37}",
                                t, f"2026-{1 + t % 12:02d}-{1 + t % 28:02d}T08:00:00Z", "hammer",
                                "P0", 3, POINTS_PER_TEST, grid))  # fmt: skip
        with conn.cursor() as cur, cur.copy(
            "COPY point_sets (rig_id, id, test, point, version, seq, completed_utc, n_averages, "
            "schema_version, digest, size, body) FROM STDIN (FORMAT BINARY)"
        ) as copy:  # fmt: skip
            copy.set_types(["text", "int8", "text", "text", "int4", "int8", "timestamptz",
                            "int4", "int4", "text", "int4", "bytea"])  # fmt: skip
            when = datetime(2026, 6, 1, 8, tzinfo=UTC)
            for i in range(n):
                t = i // POINTS_PER_TEST
                copy.write_row((f"bulk{t % 20:02d}", i, f"part-{t % 37}-{t:06d}",
                                f"P{i % POINTS_PER_TEST}", 0, i, when, 3, 1, digest, len(body),
                                body))  # fmt: skip
        conn.execute("ANALYZE")


def run(rigs: int = 20, sets: int = 200, rows: int = 100_000) -> list[Row]:
    pg = PgServer(cluster_folder(), {"fsync": "on"})
    try:
        pg.init().start()
        pg.roles()
        mb_s, total, copies, own_cpu, rigs_cpu = follow_rigs(pg, rigs, sets)
        load_ms, open_ms, list_ms, mirror_ms, n = big_archive(pg, rows)
    finally:
        pg.remove()
    ceiling = statistics.median(copies)
    return [
        (f"follower: {rigs} rigs x {sets} point sets", mb_s, "MB/s",
         f"goal >= {GOAL_RATIO * ceiling:.0f} ({GOAL_RATIO:g} x COPY)"),
        ("COPY of the same bytes, same server", ceiling, "MB/s",
         f"ceiling: median of {len(copies)} ({min(copies):.0f}..{max(copies):.0f})"),
        ("follower / COPY", mb_s / ceiling, "", f"goal >= {GOAL_RATIO:g}"),
        ("bytes archived", total / 1e6, "MB", f"{total / rigs / sets / 1e6:.2f} MB a point set"),
        ("CPU of the follower's process per GB", own_cpu / total * 1e9, "s",
         "threads, HTTP client, checks, psycopg"),
        ("CPU of the simulated rigs' processes per GB", rigs_cpu / total * 1e9, "s",
         "on separate boards in a real lab"),
        (f"list + load one test of {POINTS_PER_TEST} points, {n} rows", load_ms, "ms",
         f"goal <= {LOAD_GOAL_MS:g}"),
        ("of which: open (connect, password, schema check)", open_ms, "ms", ""),
        ("of which: find the test", list_ms, "ms", ""),
        ("the same test loaded from a mirror (SQLite)", mirror_ms, "ms",
         "decoding and stacking alone, nearly"),
    ]  # fmt: skip


def headline(rows: list[Row]) -> list[Figure]:
    copy = pick(rows, "COPY of the same bytes")
    return [
        Figure("archive follower from many rigs", pick(rows, "follower:"), "MB/s", ">=",
               GOAL_RATIO * copy, copy, "PostgreSQL COPY of the same bytes"),
        Figure("archive: list + load one test", pick(rows, "list + load"), "ms", "<=",
               LOAD_GOAL_MS, pick(rows, "the same test loaded from a mirror"),
               "the same load from a mirror"),
    ]  # fmt: skip


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rigs", type=int, default=20)
    parser.add_argument("--sets", type=int, default=200)
    parser.add_argument("--rows", type=int, default=100_000)
    args = parser.parse_args()
    show(run(args.rigs, args.sets, args.rows), decimals=2)


if __name__ == "__main__":
    main()
