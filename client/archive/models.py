"""Modal models kept beside their tests in the archive.

`put_model` stores a fitted model's npz bytes with their SHA-256 and a JSON summary (modes:
frequency, damping, ...) for (rig, test), stamped with the time it was stored; `get_model`
returns the newest (or the one stored at a given time), checked against its digest. The
fitter itself lives elsewhere (client/modal/); this module only keeps its output.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from datetime import datetime
from typing import Any

from .db import ArchiveError
from .reader import Archive


@dataclass(frozen=True, slots=True)
class ArchivedModel:
    """A stored model: its npz bytes, their SHA-256 (hex), the JSON summary, when made."""

    rig_id: str
    test: str
    created: datetime
    digest: str
    summary: dict[str, Any]
    body: bytes


def put_model(archive: Archive, test: str, npz: bytes, summary: dict[str, Any]) -> ArchivedModel:
    """Store a model fitted to `test` (of the archive's chosen rig, or the only one with it)."""
    rig_id = archive.rig(test)["id"]
    digest = hashlib.sha256(npz).hexdigest()
    rows = archive.rows(
        "INSERT INTO modal_models (rig_id, test, digest, summary, body) "
        "VALUES (%s, %s, %s, %s::jsonb, %b) RETURNING created",
        (rig_id, test, digest, json.dumps(summary), npz),
    )
    return ArchivedModel(rig_id, test, rows[0][0], digest, summary, npz)


def get_model(archive: Archive, test: str, created: datetime | None = None) -> ArchivedModel:
    """The newest model of `test` (or the one made at `created`); ArchiveError if none or if
    its bytes no longer match their digest."""
    rig_id = archive.rig(test)["id"]
    query = (
        "SELECT created, digest, summary, body FROM modal_models WHERE rig_id = %s AND "
        "test = %s" + (" AND created = %s" if created else "") + " ORDER BY created DESC LIMIT 1"
    )
    params: tuple[Any, ...] = (rig_id, test, created) if created else (rig_id, test)
    rows = archive.rows(query, params)
    if not rows:
        raise ArchiveError(f"the archive has no modal model of {test!r}")
    made, digest, summary, body = rows[0]
    body = bytes(body)
    if hashlib.sha256(body).hexdigest() != digest:
        raise ArchiveError(f"the modal model of {test!r} made {made} fails its checksum")
    return ArchivedModel(rig_id, test, made, str(digest), dict(summary), body)
