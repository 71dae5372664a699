"""Who this rig is and where it serves: the rig id and the run file, both in the state folder.

- ``<data_dir>/rig-id``: the rig's stable id, made on first start (12 hex digits, 48 bits),
  reported by /v1/info and announced by mDNS.
- ``<data_dir>/run.json``: written while the service listens, ``{"pid", "bind", "port",
  "control_port"}``; local tools (the demo, `taprigd status`, tests) read it instead of
  parsing the log. Removed when the service stops; a stale one names a pid that no longer runs.
"""

from __future__ import annotations

import json
import os
import secrets
from pathlib import Path
from typing import Any, Final

from .private import tighten, write_private

RIG_ID_FILE: Final = "rig-id"
RUN_FILE: Final = "run.json"


def new_rig_id() -> str:
    """A fresh random rig id (48 bits, 12 hex digits) for a rig's configuration to keep."""
    return secrets.token_hex(6)


def rig_id(state_dir: Path) -> str:
    """This rig's stable id, made on first start and kept in the state folder."""
    path = state_dir / RIG_ID_FILE
    try:
        text = path.read_text(encoding="ascii").strip()
    except FileNotFoundError:
        text = ""
    if not text:
        text = new_rig_id()
        write_private(path, text + "\n")
    else:
        tighten(path)  # left readable by an older version: not a secret, but the folder is private
    return text


def write_run_file(state_dir: Path, bind: str, port: int, control_port: int | None) -> None:
    """Record where this process serves, atomically (see the module docstring)."""
    record = {"pid": os.getpid(), "bind": bind, "port": port, "control_port": control_port}
    write_private(state_dir / RUN_FILE, json.dumps(record) + "\n")  # 0600, atomic


def remove_run_file(state_dir: Path) -> None:
    """Remove the run file; nothing happens if there is none."""
    (state_dir / RUN_FILE).unlink(missing_ok=True)


def read_run_file(state_dir: Path) -> dict[str, Any] | None:
    """The run file's record, or None when there is none or it is not one."""
    try:
        record = json.loads((state_dir / RUN_FILE).read_text(encoding="utf-8"))
    except (FileNotFoundError, ValueError):
        return None
    return record if isinstance(record, dict) and "pid" in record else None
