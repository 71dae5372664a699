"""The central archive: rigs followed into PostgreSQL (psycopg 3, the `archive` extra).

`Archive` reads it as `Mirror` reads a mirror; `Archiver` follows rigs into it; `migrate`
creates or upgrades its tables (SCHEMA.md, migrations/); `trend`, `put_model`, `get_model`.
Names load on first use, so `taprig` starts, and answers --help, without psycopg.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from .db import ArchiveError, ArchiveFull, migrate
    from .follow import Archiver
    from .history import trend
    from .models import get_model, put_model
    from .reader import Archive, ArchivedTest

__all__ = ["Archive", "ArchiveError", "ArchiveFull", "ArchivedTest", "Archiver", "get_model",
           "migrate", "put_model", "trend"]  # fmt: skip
_MODULE_OF = {"Archive": "reader", "ArchivedTest": "reader", "ArchiveError": "db",
              "ArchiveFull": "db", "migrate": "db", "Archiver": "follow", "get_model": "models",
              "put_model": "models", "trend": "history"}  # fmt: skip


def __getattr__(name: str) -> Any:
    if name in _MODULE_OF:
        return getattr(importlib.import_module(f".{_MODULE_OF[name]}", __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
