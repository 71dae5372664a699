"""The archive under faults: a follower killed with SIGKILL, PostgreSQL restarted mid-pull, a
rig cut off the network, a full disk under the archive, a role without write rights.

After every fault the archive must hold whole point sets only, each with the rig's bytes,
and exactly the changes up to its cursor (the cursor moves in the point set's transaction).
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable, Iterator
from pathlib import Path

import psycopg
import pytest
from web.lossy_proxy import LossyProxy  # tests/ is on sys.path (tests/conftest.py)

from taprig.client.archive import Archiver
from taprig.client.archive.config import ArchiveConfig
from taprig.schema import http

from ..conftest import ServedRig
from .conftest import commit_sets, config, is_root, rig_bodies, source, until
from .pg import ARCHIVER_PASSWORD, READER, READER_PASSWORD, PgServer
from .test_archive import archived, assert_archive_is_rigs

BIG = 300  # point sets of 4097 lines × 2 responses (about 0.6 MB each): seconds to archive
CUT_S = 60.0  # how long a rig stays unplugged from the network, seconds
ROUND_S = 5.0  # while it is, every rig completes a point set this often, seconds
ARRIVE_S = 20.0  # ... and a connected rig's must be archived within this, seconds
CUT_LINES = 513  # lines of the point sets of the cut test (small: the test is about time)


def server_sessions(dsn: str) -> int:
    """Sessions of other clients on the archive's database (a killed archiver's included)."""
    with psycopg.connect(dsn) as conn:
        row = conn.execute(
            "SELECT count(*) FROM pg_stat_activity"
            " WHERE datname = current_database() AND pid <> pg_backend_pid()"
        ).fetchone()
    return int(row[0]) if row else 0


def assert_whole_up_to_cursor(dsn: str, served: ServedRig) -> int:
    """The archive holds exactly the rig's point sets whose change is at or before the
    archived cursor, each with the rig's bytes; the number held.

    A killed archiver's server session may still be finishing a COMMIT it sent: wait until
    the server has ended it, then read the cursor and the point sets in one snapshot."""
    until(lambda: server_sessions(dsn) == 0, "the killed archiver's sessions to end")
    with psycopg.connect(dsn) as conn, conn.transaction():
        conn.execute("SET TRANSACTION ISOLATION LEVEL REPEATABLE READ")
        row = conn.execute("SELECT cursor FROM rigs WHERE rig_id = %s", (served.rig_id,)).fetchone()
        rows = conn.execute(
            "SELECT id, digest, body FROM point_sets WHERE rig_id = %s", (served.rig_id,)
        ).fetchall()
    cursor = int(row[0]) if row else 0
    store = served.running.store
    want = {s.id for s in store.list_point_sets() if s.seq <= cursor}
    held = {int(i): (str(d), bytes(b)) for i, d, b in rows}
    assert set(held) == want, (cursor, sorted(set(held) ^ want))
    bodies = rig_bodies(served)
    for i, (digest, body) in held.items():
        assert (digest, body) == bodies[i] and http.digest_matches(digest, body)
    return len(held)


def count(dsn: str) -> int:
    with psycopg.connect(dsn) as conn:
        row = conn.execute("SELECT count(*) FROM point_sets").fetchone()
    return int(row[0]) if row else 0


def at_least(dsn: str, n: int) -> Callable[[], bool]:
    return lambda: count(dsn) >= n


def write_config(folder: Path, dsn: str, served: list[ServedRig], mode: int = 0o600) -> Path:
    path = folder / "archive.toml"
    lines = [f"dsn = {json.dumps(dsn)}", "wait_s = 0.5", "busy_retry_s = 0.2", ""]
    for r in served:
        lines += ["[[rigs]]", f"url = {json.dumps(r.url)}", f"token = {json.dumps(r.token)}", ""]
    path.write_text("\n".join(lines))
    path.chmod(mode)
    return path


def taprig(*args: str, env: dict[str, str] | None = None) -> subprocess.Popen[str]:
    return subprocess.Popen([sys.executable, "-m", "taprig.client", *args],
                            env={**os.environ, **(env or {})}, text=True,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)  # fmt: skip


@pytest.mark.slow
def test_kill9_mid_transfer_then_restart_loses_and_repeats_nothing(
    archive_dsn: str, rigs: Callable[[int], list[ServedRig]], tmp_path: Path
) -> None:
    (served,) = rigs(1)
    commit_sets(served.running, "plate-big", BIG)
    cfg = write_config(tmp_path, archive_dsn, [served])
    held = 0
    for _ in range(3):
        proc = taprig("archive", "run", "--config", str(cfg), "--json")
        try:
            until(at_least(archive_dsn, held + 5), "five more point sets")
        finally:
            proc.send_signal(signal.SIGKILL)
            proc.communicate(timeout=30)
        now = assert_whole_up_to_cursor(archive_dsn, served)
        assert held < now < BIG, (held, now)  # killed mid-transfer, and nothing lost
        held = now
    proc = taprig("archive", "run", "--config", str(cfg), "--json")
    try:
        until(lambda: count(archive_dsn) == BIG, "the rest", timeout=120)
    finally:
        proc.send_signal(signal.SIGTERM)
        out, err = proc.communicate(timeout=90)
    assert proc.returncode == 0, err
    lines = [json.loads(line) for line in out.splitlines()]
    assert sum(e["event"] == "stored" for e in lines) == BIG - held  # nothing twice
    assert lines[-1]["event"] == "status" and ARCHIVER_PASSWORD not in out + err
    assert_archive_is_rigs(archive_dsn, [served])


@pytest.mark.slow
def test_postgres_restart_during_a_pull_reconnects_and_resumes(
    pg: PgServer, archive_dsn: str, rigs: Callable[[int], list[ServedRig]]
) -> None:
    (served,) = rigs(1)
    commit_sets(served.running, "plate-big", BIG)
    events: list[dict[str, object]] = []
    archiver = Archiver(config(archive_dsn, [served]), events.append).start()
    try:
        until(at_least(archive_dsn, 5), "a pull under way")
        pg.restart()
        assert count(archive_dsn) < BIG  # the restart came mid-pull
        until(lambda: count(archive_dsn) == BIG, "the pull to finish", timeout=120)
    finally:
        archiver.stop()
    errors = [str(e["error"]) for e in events if e["event"] == "error"]
    assert errors and all(ARCHIVER_PASSWORD not in e for e in errors)
    assert_archive_is_rigs(archive_dsn, [served])


def archived_of(dsn: str, rig_id: str) -> set[int]:
    """Ids of the point sets archived from one rig."""
    with psycopg.connect(dsn) as conn:
        rows = conn.execute("SELECT id FROM point_sets WHERE rig_id = %s", (rig_id,)).fetchall()
    return {int(r[0]) for r in rows}


def stored_ids(served: ServedRig) -> set[int]:
    """Ids of the point sets the rig's own store holds."""
    return {s.id for s in served.running.store.list_point_sets()}


@pytest.mark.slow
def test_a_rig_cut_off_the_network_for_a_minute_stops_nobody_and_catches_up(
    archive_dsn: str, rigs: Callable[[int], list[ServedRig]]
) -> None:
    """Three rigs; the third is unplugged (behind a relay that drops its connections and
    refuses new ones) for CUT_S. Every ROUND_S of the cut each rig completes a point set: the
    two connected rigs' reach the archive within ARRIVE_S each round, the cut rig's stay on the
    rig. After the cable is back the cut rig catches up: every point set once, the rig's bytes
    under the rig's digest (RFC 9530 Content-Digest), and each stored exactly once."""
    served = rigs(3)
    proxy = LossyProxy(served[2].service.port).start()
    events: list[dict[str, object]] = []
    try:
        cfg = config(archive_dsn, served[:2])
        cfg = ArchiveConfig(cfg.dsn, (*cfg.rigs, source(served[2], f"http://127.0.0.1:{proxy.port}")),
                            cfg.wait_s, cfg.busy_retry_s)  # fmt: skip
        for k, r in enumerate(served):
            commit_sets(r.running, f"plate-{k}", 2, n_freq=CUT_LINES, seed=k)
        archiver = Archiver(cfg, events.append).start()
        try:
            until(lambda: len(archived(archive_dsn)) == 6, "the first point sets")
            proxy.cut()
            before = archived_of(archive_dsn, served[2].rig_id)
            rounds = _offline_rounds(archive_dsn, served, time.monotonic() + CUT_S)
            state = next(r.state for r in archiver.rigs if r.state.label == "rig-3")
            assert state.state == "error" and "no answer" in str(state.last_error)
            assert archived_of(archive_dsn, served[2].rig_id) == before
            proxy.restore()
            want = stored_ids(served[2])
            assert len(want - before) == rounds  # what the cut rig measured offline
            until(lambda: archived_of(archive_dsn, served[2].rig_id) == want,
                  "the cut rig to catch up", timeout=60)  # fmt: skip
        finally:
            archiver.stop()
    finally:
        proxy.close()
    assert_archive_is_rigs(archive_dsn, served)
    stored = [(e["rig_id"], e["id"]) for e in events if e["event"] == "stored"]
    assert len(stored) == len(set(stored)) == sum(len(stored_ids(r)) for r in served)


def _offline_rounds(dsn: str, served: list[ServedRig], end: float) -> int:
    """Until `end`: each round every rig completes one point set; the connected rigs' (the
    first two) must be archived within ARRIVE_S, the cut rig's (the third) must not be.
    Rounds start every ROUND_S; between them the cut rig's share is watched. The rounds run."""
    rounds = 0
    cut = served[2]
    held = archived_of(dsn, cut.rig_id)
    while time.monotonic() < end - ROUND_S / 2:
        start = time.monotonic()
        for k, r in enumerate(served):
            commit_sets(r.running, f"offline-{rounds}-{k}", 1, n_freq=CUT_LINES, seed=100 + k)
        rounds += 1
        wanted = {r.rig_id: stored_ids(r) for r in served[:2]}
        until(lambda w=wanted: all(archived_of(dsn, rid) == ids for rid, ids in w.items()),
              f"round {rounds}: the connected rigs' point sets", timeout=ARRIVE_S)  # fmt: skip
        while time.monotonic() < min(start + ROUND_S, end):
            assert archived_of(dsn, cut.rig_id) == held, "the cut rig reached the archive"
            time.sleep(0.1)
    return rounds


@pytest.fixture
def tiny_tablespace(pg: PgServer) -> Iterator[tuple[str, Path, str]]:
    """A database whose point_sets table lives on a 3 MB tmpfs (mounted here; needs root)."""
    if not is_root():
        if os.environ.get("CI") == "true":
            pytest.fail("CI must run the disk-full test as root (it mounts a tmpfs)")
        pytest.skip("needs root to mount a tmpfs (set CI=true to require it)")
    from taprig.client.archive.db import migrate

    mount = Path(tempfile.mkdtemp(prefix="taprig-full-"))
    subprocess.run(["mount", "-t", "tmpfs", "-o", "size=3m,mode=0700", "tmpfs", str(mount)],
                   check=True)  # fmt: skip
    name = f"full_{os.getpid()}"
    try:
        subprocess.run(["chown", "postgres:postgres", str(mount)], check=True)
        pg.sql(f"CREATE TABLESPACE {name} LOCATION '{mount}'")
        dsn = pg.database(name)
        migrate(dsn)
        pg.sql(f"ALTER TABLE point_sets SET TABLESPACE {name}", dbname=name)
        yield dsn, mount, name
    finally:
        pg.sql(f"DROP DATABASE IF EXISTS {name} WITH (FORCE)")
        pg.sql(f"DROP TABLESPACE IF EXISTS {name}")
        subprocess.run(["umount", "-l", str(mount)], check=False)
        mount.rmdir()


def test_a_full_disk_is_refused_clearly_and_nothing_is_half_written(
    tiny_tablespace: tuple[str, Path, str], rigs: Callable[[int], list[ServedRig]], tmp_path: Path
) -> None:
    dsn, mount, _name = tiny_tablespace
    (served,) = rigs(1)
    commit_sets(served.running, "plate-1", 12)  # about 7 MB: more than the 3 MB disk
    cfg = write_config(tmp_path, dsn, [served])
    proc = taprig("archive", "run", "--once", "--config", str(cfg))
    out, err = proc.communicate(timeout=120)
    assert proc.returncode == 4, (out, err)
    assert "out of disk space" in err and "Traceback" not in err and ARCHIVER_PASSWORD not in err
    held = assert_whole_up_to_cursor(dsn, served)
    assert 0 < held < 12
    subprocess.run(["mount", "-o", "remount,size=64m", str(mount)], check=True)
    proc = taprig("archive", "run", "--once", "--config", str(cfg))
    out, err = proc.communicate(timeout=120)
    assert proc.returncode == 0, err
    assert_archive_is_rigs(dsn, [served])


def test_a_role_without_write_rights_is_refused_and_writes_nothing(
    pg: PgServer, archive_dsn: str, rigs: Callable[[int], list[ServedRig]], tmp_path: Path
) -> None:
    (served,) = rigs(1)
    commit_sets(served.running, "plate-1", 2)
    dbname = archive_dsn.split("dbname=")[1].split()[0]
    pg.sql(f"GRANT SELECT ON ALL TABLES IN SCHEMA public TO {READER}", dbname=dbname)
    desk = pg.dsn(dbname, READER, READER_PASSWORD)
    proc = taprig(
        "archive", "run", "--once", "--config", str(write_config(tmp_path, desk, [served]))
    )
    out, err = proc.communicate(timeout=120)
    assert proc.returncode == 4, (out, err)
    assert "permission denied for table rigs" in err and "Traceback" not in err
    assert READER_PASSWORD not in out + err
    assert archived(archive_dsn) == {}
    with psycopg.connect(archive_dsn) as conn:
        assert conn.execute("SELECT count(*) FROM rigs").fetchone() == (0,)
