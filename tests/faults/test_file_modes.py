"""The data folder 0700 and every file the daemon keeps there 0600, whatever the umask.

taprigd is started as a process with umask 000 (which takes no permission bits away), in a
data folder an earlier version left 0755 with a loose rig-id file; after a tap is stored and
the session kept, every file is checked with stat(2). SQLite makes -wal and -shm with the
database file's mode (sqlite.org, "Write-Ahead Logging", and os_unix.c's robust_open).
"""

from __future__ import annotations

import os
import stat
from pathlib import Path

from .process import Taprigd, tap_until_accepted, wait_until

PRIVATE = ("token", "taprig.sqlite3", "taprig.sqlite3-wal", "taprig.sqlite3-shm", "run.json",
           "rig-id", "session.json")  # fmt: skip


def _mode(path: Path) -> int:
    return stat.S_IMODE(path.stat().st_mode)


def test_private_modes_with_umask_000(tmp_path: Path) -> None:
    data = tmp_path / "rig"
    data.mkdir(mode=0o755)
    data.chmod(0o755)
    (data / "rig-id").write_text("0123456789ab\n")
    (data / "rig-id").chmod(0o644)
    daemon = Taprigd(data)
    old = os.umask(0)
    try:
        daemon.start()
    finally:
        os.umask(old)
    daemon.wait_ready()
    try:
        tap_until_accepted(daemon)  # a point set stored: the WAL has been written
        wait_until("the session file", lambda: (data / "session.json").exists(), 10.0)
        assert _mode(data) == 0o700, oct(_mode(data))
        modes = {name: oct(_mode(data / name)) for name in PRIVATE}
        assert set(modes.values()) == {oct(0o600)}, modes
        assert (data / "rig-id").read_text() == "0123456789ab\n"  # kept, only its mode mended
    finally:
        assert daemon.stop() == 0
