"""`taprig archive ...` and `taprig tests/export/check --archive` as a user runs them: real
processes, a real rig on loopback, a real PostgreSQL server."""

from __future__ import annotations

import json
import os
import subprocess
import sys
import zipfile
from collections.abc import Callable
from pathlib import Path
from typing import Any

from taprig.client.rigs import PairedRig, Places, RigBook

from ..conftest import ServedRig
from .conftest import commit_sets
from .pg import ARCHIVER_PASSWORD, PgServer
from .test_archive import assert_archive_is_rigs


def taprig(home: Path, *args: str, dsn: str | None = None) -> subprocess.CompletedProcess[str]:
    env = {**os.environ, "TAPRIG_HOME": str(home)}
    env.pop("TAPRIG_ARCHIVE_DSN", None)
    if dsn is not None:
        env["TAPRIG_ARCHIVE_DSN"] = dsn
    return subprocess.run([sys.executable, "-m", "taprig.client", *args], env=env,
                          capture_output=True, text=True, timeout=120)  # fmt: skip


def ok(out: subprocess.CompletedProcess[str]) -> Any:
    assert out.returncode == 0, out.stderr
    assert ARCHIVER_PASSWORD not in out.stdout + out.stderr
    lines = out.stdout.splitlines()
    if len(lines) > 1 and all(line.startswith("{") for line in lines):  # JSON lines
        return [json.loads(line) for line in lines]
    return json.loads(out.stdout) if out.stdout.startswith("{") else out.stdout


def test_export_from_the_archive_is_byte_identical_to_the_mirrors(
    pg: PgServer, rigs: Callable[[int], list[ServedRig]], tmp_path: Path
) -> None:
    """The same test exported from a workstation's mirror and from the archive: CSV files
    equal byte for byte; npz files equal member by member (the zip container stamps each
    member with the time it was written, which is all that may differ)."""
    (served,) = rigs(1)
    commit_sets(served.running, "plate-1", 5)
    home = tmp_path / "home"
    RigBook(Places.from_env({"TAPRIG_HOME": str(home)})).save(
        PairedRig(served.rig_id, "rig-1", served.url, served.token))  # fmt: skip
    dsn = pg.database("cli_export")
    applied = ok(taprig(home, "archive", "migrate", "--json", dsn=dsn))["applied"]
    assert applied == ["0001_archive", "0002_wire_schemas"]
    ok(taprig(home, "pull"))
    # The follower with no configuration: the DSN from the environment, the paired rigs.
    events = ok(taprig(home, "archive", "run", "--once", "--json", dsn=dsn))
    assert [e["event"] for e in events] == ["stored"] * 5 + ["status"]
    assert events[-1]["rigs"][0]["stored"] == 5
    assert_archive_is_rigs(dsn, [served])
    listed = ok(taprig(home, "tests", "--archive", dsn, "--json"))
    assert [(t["test"], t["point_sets"]) for t in listed["tests"]] == [("plate-1", 5)]
    for fmt, suffix in (("csv", "csv"), ("npz", "npz")):
        a, b = tmp_path / f"mirror.{suffix}", tmp_path / f"archive.{suffix}"
        ok(taprig(home, "export", "plate-1", "--format", fmt, "--out", str(a)))
        ok(taprig(home, "export", "plate-1", "--format", fmt, "--out", str(b), "--archive", dsn))
        if fmt == "csv":
            assert a.read_bytes() == b.read_bytes()
        else:
            with zipfile.ZipFile(a) as za, zipfile.ZipFile(b) as zb:
                assert za.namelist() == zb.namelist()
                assert all(za.read(n) == zb.read(n) for n in za.namelist())
    mine = ok(taprig(home, "check", "plate-1", "--json"))
    theirs = ok(taprig(home, "check", "plate-1", "--json", "--archive", dsn))
    assert mine == theirs


def test_status_find_and_clear_refusals_without_passwords(
    pg: PgServer, archive_dsn: str, rigs: Callable[[int], list[ServedRig]], tmp_path: Path
) -> None:
    (served,) = rigs(1)
    commit_sets(served.running, "housing_0017", 2)
    home = tmp_path / "home"
    RigBook(Places.from_env({"TAPRIG_HOME": str(home)})).save(
        PairedRig(served.rig_id, "rig-1", served.url, served.token))  # fmt: skip
    ok(taprig(home, "-v", "archive", "run", "--once", dsn=archive_dsn))
    status = ok(taprig(home, "archive", "status", "--json", dsn=archive_dsn))
    assert "password" not in status["database"] and "user=archiver" in status["database"]
    (rig,) = status["rigs"]
    assert (rig["name"], rig["point_sets"], rig["followed_now"]) == ("rig-1", 2, False)
    assert rig["cursor"] == served.running.store.last_seq() and rig["last_error"] is None
    found = ok(taprig(home, "archive", "find", "--part", "housing", "--json", dsn=archive_dsn))
    assert [t["test"] for t in found["tests"]] == ["housing_0017"]
    # A configuration file that holds the password but others can read: refused, unused.
    cfg = tmp_path / "archive.toml"
    cfg.write_text(f"dsn = {json.dumps(archive_dsn)}\n")
    cfg.chmod(0o644)
    out = taprig(home, "archive", "run", "--once", "--config", str(cfg))
    assert out.returncode == 4 and "chmod 600" in out.stderr
    assert ARCHIVER_PASSWORD not in out.stdout + out.stderr
    # A database that does not answer: one line, no password, no traceback.
    gone = archive_dsn.replace(f"port={pg.port}", "port=9")
    out = taprig(home, "-v", "archive", "status", dsn=gone)
    assert out.returncode == 4 and "cannot reach the archive database" in out.stderr
    assert ARCHIVER_PASSWORD not in out.stderr and "Traceback" not in out.stderr
    out = taprig(home, "tests", "--archive", "not a dsn at all")
    assert out.returncode == 4 and "not a PostgreSQL connection string" in out.stderr
