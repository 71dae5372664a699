"""Response bodies of the rig's HTTP service, and the cache of encoded point sets.

JSON is written strictly (no NaN: a non-finite value is null); a point set is msgpack
(schema.objects, schema.codec) or JSON by the request's Accept header. A stored point set
never changes, so its encoded forms are kept in a `BodyCache` for the next reader.
"""

from __future__ import annotations

import asyncio
import collections
import json
import math
from collections.abc import Callable, Mapping
from typing import TYPE_CHECKING, Any, Final

import numpy as np
from aiohttp import web

from taprig.schema import codec, http, objects, records

from .routes import JSON, Call, Payload

if TYPE_CHECKING:
    from taprig.firmware_protocol import DeviceInfo

    from ..capture.session import HitOutcome
    from ..store import Store, TestPlan

BODY_CACHE_BYTES: Final = 64 << 20  # encoded point sets kept for the next reader, bytes
Encoded = tuple[bytes, str, str]  # body, content type, Content-Digest


def plain(value: Any) -> Any:
    """`value` with tuples as lists and non-finite floats as None (JSON has no NaN)."""
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {str(k): plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [plain(v) for v in value]
    return value


def dumps(value: Any) -> str:
    return json.dumps(plain(value), allow_nan=False, separators=(",", ":"))


def json_response(
    payload: Any, status: int = 200, headers: Mapping[str, str] | None = None
) -> web.Response:
    return web.Response(
        body=dumps(payload).encode(), status=status, headers=headers, content_type=JSON
    )


def device_json(info: DeviceInfo | None) -> Payload | None:
    if info is None:
        return None
    return {
        "id": info.device_id, "firmware": info.firmware, "rate_hz": info.rate_hz,
        "protocol_version": info.protocol_version,
        "sample_format": info.sample_format.name.lower(),
        "full_scale_v": [c.full_scale_v for c in info.channels],
        "adc_bits": [c.adc_bits for c in info.channels],
    }  # fmt: skip


def outcome_json(o: HitOutcome) -> Payload:
    return {"point": o.point, "counted": o.counted, "waiting": o.waiting,
            "averages": o.averages, "completed": o.completed is not None}  # fmt: skip


def test_obj(plan: TestPlan) -> Payload:
    return objects.test_to_obj(records.test_from_record(plan))


def reply(call: Call, obj: Payload) -> web.Response:
    """`obj` as msgpack when the client prefers it, else as JSON."""
    if http.wants_msgpack(call.request.headers.get("Accept")):
        return web.Response(body=codec.pack(obj), content_type=http.MSGPACK)
    return json_response(obj)


async def reply_built(call: Call, build: Callable[[], Payload]) -> web.Response:
    """`build()` answered as `reply` would, built and encoded on a worker thread (for answers
    that may be large, such as every test with its grid)."""
    as_msgpack = http.wants_msgpack(call.request.headers.get("Accept"))

    def encoded() -> tuple[bytes, str]:
        obj = build()
        return (codec.pack(obj), http.MSGPACK) if as_msgpack else (dumps(obj).encode(), JSON)

    body, media = await asyncio.to_thread(encoded)
    return web.Response(body=body, content_type=media)


def stored_body(store: Store, pid: int, with_hits: bool, as_msgpack: bool) -> Encoded | None:
    """(body, content type, Content-Digest value) of the msgpack body written at commit, or
    None when the request asks for another form (JSON, raw hits) or none was written.

    Worker thread. The body is served as stored, in the schema it was written in: clients
    read every schema of `READ_VERSIONS`, and a mirror holds the bytes it was first served.
    """
    if not as_msgpack or with_hits:
        return None
    stored = store.get_wire_body(pid, *records.READ_VERSIONS)
    return None if stored is None else (stored[1], http.MSGPACK, stored[0])


def encode_point_set(store: Store, pid: int, with_hits: bool, as_msgpack: bool) -> Encoded:
    """(body, content type, Content-Digest value) of a stored point set, per the wire schema.

    One worker-thread call: the body stored at commit (`stored_body`) if there is one;
    anything else is read, encoded and checksummed here.
    """
    stored = stored_body(store, pid, with_hits, as_msgpack)
    if stored is not None:
        return stored
    ps = store.get_point_set(pid, with_hits)
    obj = objects.point_set_to_obj(records.point_set_from_record(pid, ps), with_hits)
    body, media = (codec.pack(obj), http.MSGPACK) if as_msgpack else (_point_json(obj), JSON)
    return body, media, http.content_digest(body)


class BodyCache:
    """Encoded point sets, least recently used out beyond `max_bytes` of bodies.

    Sound because a stored point set never changes: measuring a point again makes a new
    point set with a new id. Every workstation pulls each new point set once; the first
    pull pays for the encoding.
    """

    def __init__(self, max_bytes: int) -> None:
        self.max_bytes, self.bytes = max_bytes, 0
        self._items: collections.OrderedDict[tuple[int, bool, bool], Encoded] = (
            collections.OrderedDict()
        )

    def get(self, key: tuple[int, bool, bool]) -> Encoded | None:
        item = self._items.get(key)
        if item is not None:
            self._items.move_to_end(key)
        return item

    def put(self, key: tuple[int, bool, bool], item: Encoded) -> None:
        if key in self._items or len(item[0]) > self.max_bytes:
            return
        self._items[key] = item
        self.bytes += len(item[0])
        while self.bytes > self.max_bytes:
            _, old = self._items.popitem(last=False)
            self.bytes -= len(old[0])


def _point_json(obj: Payload) -> bytes:
    """JSON of a `objects.point_set_to_obj` object: each array's bytes become nested lists
    (a hit's codes as integers, its scale beside them).

    A real array is ``{"dtype", "shape", "values"}``, a complex one ``{"dtype", "shape",
    "real", "imag"}``; a non-finite value is null. Finite values round-trip exactly (Python
    writes the shortest text that reads back as the same double).
    """
    out = dict(obj)
    for key, value in obj.items():
        if isinstance(value, dict) and set(value) == {"dtype", "shape", "data"}:
            out[key] = _array_json(value)
    out["hits"] = [
        {**h, **{k: None if h[k] is None else _array_json(h[k]) for k in ("data", "scale")}}
        for h in obj["hits"]
    ]
    for h in out["hits"]:
        h["peak_force_n"], h["pulse_width_s"] = plain(h["peak_force_n"]), plain(h["pulse_width_s"])
    return json.dumps(out, allow_nan=False, separators=(",", ":")).encode()


def _array_json(a: Payload) -> Payload:
    arr = np.frombuffer(a["data"], dtype=np.dtype(a["dtype"])).reshape(a["shape"])
    if arr.dtype.kind == "c":
        return {"dtype": a["dtype"], "shape": a["shape"],
                "real": _finite_list(arr.real), "imag": _finite_list(arr.imag)}  # fmt: skip
    return {"dtype": a["dtype"], "shape": a["shape"], "values": _finite_list(arr)}


def _finite_list(arr: np.ndarray) -> Any:
    if arr.dtype.kind == "i":  # a hit's device codes stay integers
        return arr.tolist()
    if bool(np.isfinite(arr).all()):
        return arr.astype(np.float64).tolist()
    out = arr.astype(np.float64).astype(object)
    out[~np.isfinite(arr)] = None
    return out.tolist()
