"""A stored point set's wire body: encoded once, at commit, served as stored.

The store calls `encode_body` inside the commit's transaction (see Store(body_encoder=)),
so the body a workstation pulls is the body of exactly what was committed.
"""

from __future__ import annotations

from taprig.schema import codec, http, objects, records

from .records import PointSet


def encode_body(point_set_id: int, ps: PointSet) -> tuple[int, str, bytes]:
    """(schema version, Content-Digest, msgpack body without raw hits) of a point set."""
    obj = objects.point_set_to_obj(records.point_set_from_record(point_set_id, ps), with_hits=False)
    body = codec.pack(obj)
    return records.SCHEMA_VERSION, http.content_digest(body), body
