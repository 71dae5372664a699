"""The central archive: rigs followed into PostgreSQL (psycopg 3, the `archive` extra).

`Archive` reads it as `Mirror` reads a mirror; `Archiver` follows rigs into it; the schema
is in SCHEMA.md and migrations/.
"""

from .db import ArchiveError, ArchiveFull, migrate
from .follow import Archiver
from .models import get_model, put_model
from .reader import Archive, ArchivedTest
from .trend import trend

__all__ = [
    "Archive",
    "ArchiveError",
    "ArchiveFull",
    "ArchivedTest",
    "Archiver",
    "get_model",
    "migrate",
    "put_model",
    "trend",
]
