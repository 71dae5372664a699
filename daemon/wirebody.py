"""A stored point set's wire body: encoded once, at commit, served as stored.

The store's writer thread calls `encode_body` just before the commit's transaction (see
Store(body_encoder=)), with the point set numbered as that transaction stores it, so the body
a workstation pulls is the body of exactly what was committed, and the write lock is not held
while megabytes are cast, packed and hashed.
"""

from __future__ import annotations

from taprig.schema import codec, http, objects, records

from .records import PointSet


def encode_body(point_set_id: int, ps: PointSet) -> tuple[int, str, bytes]:
    """(schema version, Content-Digest, msgpack body without raw hits) of a point set.

    The arrays are cast to the dtypes of `schema.pointset` by the encoder, as the store casts
    them for its rows: the body decodes to exactly the stored arrays.
    """
    obj = objects.point_set_to_obj(records.point_set_from_record(point_set_id, ps), with_hits=False)
    body = codec.pack(obj)
    return records.SCHEMA_VERSION, http.content_digest(body), body
