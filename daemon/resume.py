"""The session file, ``<data_dir>/session.json``: the selected test and whether capture is
wanted, so that a restarted daemon (after a crash, a power cut, a watchdog kill) carries on
where it was. Written atomically on select, arm and disarm."""

from __future__ import annotations

import json
import logging
from pathlib import Path
from typing import Any, Final

from .private import write_private

log = logging.getLogger(__name__)

SESSION_FILE: Final = "session.json"


def keep(data_dir: Path, test: str | None, wanted: bool) -> None:
    """Record `test` and whether capture is `wanted`; a failure (a full disk) is logged."""
    path = data_dir / SESSION_FILE
    try:  # durable: after a power cut the rename never names an empty file
        write_private(path, json.dumps({"test": test, "armed": wanted}) + "\n", durable=True)
    except OSError as exc:
        log.warning("cannot keep the session in %s: %s", path, exc)


def read(data_dir: Path) -> dict[str, Any] | None:
    """The kept record ``{"test", "armed"}``, or None when there is none with a test."""
    try:
        record = json.loads((data_dir / SESSION_FILE).read_text("utf-8"))
    except (FileNotFoundError, ValueError):
        return None
    if not isinstance(record, dict) or not isinstance(record.get("test"), str):
        return None
    return record
