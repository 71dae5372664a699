"""Files only the daemon's user may read: the data folder 0700, what it keeps there 0600.

The data folder holds the token, the store (with its -wal and -shm files, which SQLite
creates with the database file's own mode), the run file, the rig id and the session file.
Modes are set with ``fchmod``/``chmod`` after creation, so they do not depend on the umask
of whoever started the daemon (a umask only takes bits away, and 000 takes none).
"""

from __future__ import annotations

import os
import stat
from pathlib import Path
from typing import Final

DIR_MODE: Final = 0o700
FILE_MODE: Final = 0o600


def private_dir(path: str | Path) -> Path:
    """Make `path` (and its parents) if needed; the folder itself ends up 0700."""
    path = Path(path)
    path.mkdir(mode=DIR_MODE, parents=True, exist_ok=True)
    if stat.S_IMODE(path.stat().st_mode) != DIR_MODE:
        path.chmod(DIR_MODE)
    return path


def private_file(path: str | Path) -> None:
    """Make `path` if missing, empty; either way it ends up 0600 (a symbolic link is refused:
    OSError)."""
    fd = os.open(path, os.O_RDWR | os.O_CREAT | os.O_NOFOLLOW | os.O_CLOEXEC, FILE_MODE)
    try:
        if stat.S_IMODE(os.fstat(fd).st_mode) != FILE_MODE:
            os.fchmod(fd, FILE_MODE)
    finally:
        os.close(fd)


def tighten(path: str | Path) -> None:
    """Make an existing file 0600 (files left by an older version); nothing if it is missing."""
    try:
        st = os.lstat(path)
    except FileNotFoundError:
        return
    # A symbolic link is left alone (Linux has no lchmod); the folder is the daemon's, 0700.
    if stat.S_ISREG(st.st_mode) and stat.S_IMODE(st.st_mode) != FILE_MODE:
        os.chmod(path, FILE_MODE)


def write_private(path: str | Path, text: str, *, durable: bool = False) -> None:
    """Replace `path` atomically with `text` (UTF-8) in a 0600 file; `durable`: fsync first,
    so that a power cut leaves the old file or the new one, never an empty one."""
    path = Path(path)
    tmp = path.with_name(path.name + ".tmp")
    tmp.unlink(missing_ok=True)  # a leftover of a cut-short write, possibly with another mode
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_NOFOLLOW | os.O_CLOEXEC,
                 FILE_MODE)  # fmt: skip
    try:
        os.fchmod(fd, FILE_MODE)
        with os.fdopen(fd, "w", encoding="utf-8", closefd=False) as f:
            f.write(text)
            f.flush()
            if durable:
                os.fsync(f.fileno())
    finally:
        os.close(fd)
    os.replace(tmp, path)
