"""A real PostgreSQL server for tests and benchmarks: Debian's binaries, a temporary cluster.

initdb and pg_ctl refuse to run as root, and the tests run as root in CI: the cluster then
belongs to the unprivileged `postgres` user the Debian package creates (commands run through
`runuser -u postgres`, the folder is chowned to it). Run as any other user, the cluster is
that user's. The server listens on a free loopback port and on a unix socket inside the
folder; local socket connections are trusted (the superuser, for setup), TCP connections need
a password (SCRAM), so the tests exercise the DSN's password and its redaction.
"""

from __future__ import annotations

import glob
import os
import pwd
import shutil
import socket
import subprocess
import tempfile
from pathlib import Path
from typing import Final

SUPERUSER: Final = "postgres"
ARCHIVER: Final = "archiver"
ARCHIVER_PASSWORD: Final = "pw-Zq81-never-in-logs"
READER: Final = "desk"
READER_PASSWORD: Final = "pw-Rk55-desk-only"


def bin_dir() -> Path:
    """The newest installed PostgreSQL's bin folder (Debian: /usr/lib/postgresql/<v>/bin)."""
    found = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"),
                   key=lambda p: int(Path(p).parent.parent.name))  # fmt: skip
    if not found:
        raise RuntimeError("PostgreSQL is not installed (apt-get install postgresql)")
    return Path(found[-1]).parent


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def cluster_folder() -> Path:
    """A new folder for a cluster, directly under the system's temporary folder.

    Not under pytest's tmp_path: pytest resets its root to mode 0700 whenever a session starts
    (other test runs on the machine too), which would lock the server's user out.
    """
    return Path(tempfile.mkdtemp(prefix="taprig-pg-")) / "cluster"


class PgServer:
    """One cluster in `folder` (its parent must be reachable by the server's user)."""

    def __init__(self, folder: Path, settings: dict[str, str] | None = None) -> None:
        self.folder, self.data = folder, folder / "data"
        self.port = free_port()
        self.bin = bin_dir()
        self.settings = {"fsync": "off", "max_connections": "100", **(settings or {})}
        self._user = SUPERUSER if os.geteuid() == 0 else None
        folder.mkdir(parents=True, exist_ok=True)
        os.chmod(folder.parent, 0o711)
        if self._user is not None:
            entry = pwd.getpwnam(self._user)
            os.chown(folder, entry.pw_uid, entry.pw_gid)

    def run(self, *argv: str | Path, check: bool = True) -> subprocess.CompletedProcess[str]:
        cmd = [str(a) for a in argv]
        if self._user is not None:
            cmd = ["runuser", "-u", self._user, "--", *cmd]
        out = subprocess.run(cmd, capture_output=True, text=True, timeout=120, cwd=self.folder)
        if check and out.returncode != 0:
            raise RuntimeError(f"{cmd}: {out.returncode}\n{out.stdout}\n{out.stderr}")
        return out

    def init(self) -> PgServer:
        self.run(self.bin / "initdb", "-D", self.data, "-U", SUPERUSER, "--auth-local=trust",
                 "--auth-host=scram-sha-256", "-E", "UTF8", "--locale=C.UTF-8")  # fmt: skip
        return self

    def start(self) -> None:
        opts = f"-p {self.port} -k {self.folder} -c listen_addresses=127.0.0.1 " + " ".join(
            f"-c {k}={v}" for k, v in self.settings.items()
        )
        self.run(self.bin / "pg_ctl", "-D", self.data, "-l", self.folder / "server.log",
                 "-o", opts, "-w", "-t", "60", "start")  # fmt: skip

    def stop(self, mode: str = "fast") -> None:
        self.run(self.bin / "pg_ctl", "-D", self.data, "-m", mode, "-w", "-t", "60", "stop",
                 check=False)  # fmt: skip

    def restart(self) -> None:
        self.stop()
        self.start()

    @property
    def admin_dsn(self) -> str:
        return f"host={self.folder} port={self.port} user={SUPERUSER} dbname=postgres"

    def dsn(self, dbname: str, user: str = ARCHIVER, password: str = ARCHIVER_PASSWORD) -> str:
        return f"host=127.0.0.1 port={self.port} dbname={dbname} user={user} password={password}"

    def sql(self, statement: str, dbname: str = "postgres") -> str:
        """Run one statement as the superuser through psql; its output (unaligned)."""
        out = self.run(self.bin / "psql", "-X", "-A", "-t", "-v", "ON_ERROR_STOP=1", "-h",
                       self.folder, "-p", str(self.port), "-U", SUPERUSER, "-d", dbname,
                       "-c", statement)  # fmt: skip
        return out.stdout.strip()

    def roles(self) -> None:
        self.sql(f"CREATE ROLE {ARCHIVER} LOGIN PASSWORD '{ARCHIVER_PASSWORD}'")
        self.sql(f"CREATE ROLE {READER} LOGIN PASSWORD '{READER_PASSWORD}'")

    def database(self, name: str) -> str:
        """A new database owned by the archiver; its DSN (as the archiver, over TCP)."""
        self.sql(f"CREATE DATABASE {name} OWNER {ARCHIVER}")
        return self.dsn(name)

    def log(self) -> str:
        path = self.folder / "server.log"
        return path.read_text(errors="replace") if path.exists() else ""

    def remove(self) -> None:
        self.stop("immediate")
        shutil.rmtree(self.folder.parent, ignore_errors=True)
