"""The rig's HTTP service under /v1: aiohttp on the daemon's asyncio event loop.

One route table (`ROUTES`) is the single source of truth: the server registers its handlers
from it, validates every path parameter, query parameter and JSON body against the schemas
it declares, and `openapi()` turns the same table into the OpenAPI 3.1 document served at
/v1/openapi.json (and committed as daemon/openapi.json; a test keeps the two equal).

Threads: handlers run on the event loop and never block it; every rig and store call goes
through `asyncio.to_thread`. Rig events arrive on the rig's processing thread and are handed
to the loop with `loop.call_soon_threadsafe`, then fanned out to the server-sent event
streams and to the long-polls of /v1/changes.

The phone page (daemon/page.py, files in daemon/web/) is added beside the table, outside
/v1, by `make_app`: static files that need no token.

Errors are mapped to statuses in one place, `error_of`. Control requests carry a
client-chosen ``request_id``; the outcome of each is remembered (bounded, least recently
used first out) and a retry with the same id gets the same response without acting again.

Regenerate the committed document with
``python -m taprig.daemon.service --openapi > daemon/openapi.json``.
"""

from __future__ import annotations

import argparse
import asyncio
import collections
import contextlib
import dataclasses
import functools
import json
import logging
import math
import re
import sys
from collections.abc import Awaitable, Callable, Mapping, Sequence
from dataclasses import dataclass
from http import HTTPStatus
from typing import TYPE_CHECKING, Any, Final

import numpy as np
from aiohttp import web

from taprig.schema import API_VERSION, codec, http, objects, records

from . import __version__, page
from .advertise import rig_id as _rig_id
from .errors import ConfigError, SessionError, StoreError, TaprigError
from .records import GridPoint, RovingMode
from .store import Store, TestPlan, import_grid_csv

if TYPE_CHECKING:
    from taprig.firmware_protocol import DeviceInfo

    from .auth import Auth
    from .rig import RigEvent
    from .runner import RunningRig
    from .session import HitOutcome

log = logging.getLogger(__name__)

PREFIX: Final = "/v1"
JSON: Final = "application/json"
EVENT_STREAM: Final = "text/event-stream"
MAX_WAIT_S: Final = 30.0  # longest long-poll of /v1/changes, seconds
HEARTBEAT_S: Final = 15.0  # comment line on an idle event stream, seconds
REMEMBERED: Final = 1024  # control outcomes kept for retries
STREAM_QUEUE: Final = 512  # events buffered per event-stream client before it is dropped
CHANGES_LIMIT: Final = 1000  # entries per /v1/changes answer
BODY_CACHE_BYTES: Final = 64 << 20  # encoded point sets kept for the next reader, bytes
SHUTDOWN_S: Final = 2.0  # how long close waits for requests in flight
# The access log names the peer, the request line, the status, the size and the time;
# never a header, so the Authorization header (the token) cannot reach a log.
ACCESS_LOG_FORMAT: Final = '%a "%r" %s %b %Tfs'
# And, should a token be written anyway (a client putting it in a URL), these loggers redact it.
REDACTED_LOGGERS: Final = ("aiohttp.access", "aiohttp.server", "aiohttp.web", __name__)

Payload = dict[str, Any]
Outcome = tuple[int, Payload, dict[str, str]]
Encoded = tuple[bytes, str, str]  # body, content type, Content-Digest

# ---------------------------------------------------------------- schemas (JSON Schema 2020-12)

NAME: Final[Payload] = {
    "type": "string",
    "pattern": r"^(?!\.+$)[A-Za-z0-9_.-]{1,64}$",
    "description": "a test name: 1..64 of A-Z a-z 0-9 _ . - (not dots alone)",
}
LABEL: Final[Payload] = {
    "type": "string",
    "pattern": r"^(?!\.+$)[A-Za-z0-9_.-]{1,64}$",
    "description": "a grid point label: 1..64 of A-Z a-z 0-9 _ . - (not dots alone)",
}
REQUEST_ID: Final[Payload] = {
    "type": "string",
    "pattern": r"^[A-Za-z0-9_-]{8,64}$",
    "description": "chosen by the client, unique per intended action; a retry reuses it",
}
SEQ: Final[Payload] = {"type": "integer", "minimum": 0, "maximum": 2**53}
COORD: Final[Payload] = {"type": "number", "minimum": -1e3, "maximum": 1e3}
GRID_POINT: Final[Payload] = {
    "type": "object",
    "additionalProperties": False,
    "required": ["label", "x", "y", "z"],
    "properties": {
        "label": LABEL,
        "x": {**COORD, "description": "metres"},
        "y": {**COORD, "description": "metres"},
        "z": {**COORD, "description": "metres"},
        "direction": {"type": "string", "enum": ["+x", "-x", "+y", "-y", "+z", "-z"]},
    },
}
CREATE_TEST: Final[Payload] = {
    "type": "object",
    "additionalProperties": False,
    "required": ["name"],
    "oneOf": [{"required": ["grid"]}, {"required": ["grid_csv"]}],
    "properties": {
        "request_id": REQUEST_ID,
        "name": NAME,
        "grid": {"type": "array", "minItems": 1, "maxItems": 4096, "items": GRID_POINT},
        "grid_csv": {
            "type": "string",
            "maxLength": 1 << 20,
            "description": "CSV text with header label,x,y,z[,direction], metres",
        },
        "roving_mode": {"type": "string", "enum": [m.value for m in RovingMode]},
        "reference": {**LABEL, "description": "reference point; default the first grid point"},
        "averages": {"type": "integer", "minimum": 1, "maximum": 1000},
        "sensor_points": {
            "type": "object",
            "maxProperties": 64,
            "propertyNames": LABEL,
            "additionalProperties": LABEL,
            "description": "response channel label -> the point its sensor sits on",
        },
    },
}


def _control(doc: str, **fields: Payload) -> tuple[str, Payload]:
    body = {
        "type": "object",
        "additionalProperties": False,
        "required": ["request_id", *fields],
        "properties": {"request_id": REQUEST_ID, **fields},
    }
    return doc, body


ACTIONS: Final[dict[str, tuple[str, Payload]]] = {
    "select": _control("select a stored test; the cursor goes to its first open point", test=NAME),
    "arm": _control("start counting hits"),
    "disarm": _control("stop counting hits"),
    "accept": _control("accept the hit waiting for a decision"),
    "reject": _control("reject the hit waiting for a decision"),
    "redo": _control("discard the averages of the current point and measure it again"),
    "next": _control("move the cursor to the next point"),
    "previous": _control("move the cursor to the previous point"),
    "goto": _control("move the cursor to a point of the selected test", point=LABEL),
}


# ---------------------------------------------------------------- the route table


@dataclass(frozen=True, slots=True)
class Param:
    """A path or query parameter; query values are converted to the schema's type."""

    name: str
    where: str  # "path" | "query"
    schema: Payload
    doc: str


@dataclass(frozen=True, slots=True)
class Route:
    """One endpoint: its handler is `Service._on_<handler>`; public routes need no token."""

    method: str
    path: str
    op: str
    handler: str
    summary: str
    public: bool = False
    params: tuple[Param, ...] = ()
    body: Payload | None = None
    ok: int = 200
    media: tuple[str, ...] = (JSON,)
    errors: tuple[int, ...] = ()
    action: str | None = None


_TEST = Param("name", "path", NAME, "test name")
_POINT_ID = Param("id", "path", {"type": "integer", "minimum": 1, "maximum": 2**53},
                  "point set id")  # fmt: skip

ROUTES: Final[tuple[Route, ...]] = (
    Route("GET", "/v1/info", "getInfo", "info",
          "rig name and versions; no token needed", public=True),
    Route("GET", "/v1/health", "getHealth", "health",
          "liveness: the store answers (503 if not) and the link state", public=True,
          errors=(503,)),
    Route("GET", "/v1/openapi.json", "getOpenApi", "openapi",
          "this document", public=True),
    Route("GET", "/v1/state", "getState", "state",
          "session cursor, device state and link statistics", errors=(503,)),
    Route("GET", "/v1/hits/last", "getLastHit", "last_hit",
          "the last hit: verdict, reasons, min/max envelopes of every channel and the "
          "point's FRF magnitude and coherence so far, decimated for display",
          errors=(404,)),
    Route("GET", "/v1/tests", "listTests", "tests", "all tests, oldest first", errors=(503,)),
    Route("GET", "/v1/tests/{name}", "getTest", "test", "one test with its grid",
          params=(_TEST,), errors=(404, 503)),
    Route("POST", "/v1/tests", "createTest", "create_test",
          "store a new test (grid as a list or as CSV text)", body=CREATE_TEST, ok=201,
          errors=(409, 503)),
    Route("GET", "/v1/points", "listPoints", "points",
          "summaries of stored point sets, in change order",
          params=(Param("test", "query", NAME, "only this test"),
                  Param("since", "query", SEQ, "only point sets with seq > since")),
          errors=(404, 503)),
    Route("GET", "/v1/points/{id}", "getPoint", "point",
          "one point set: JSON (arrays as lists) or msgpack (typed arrays) by Accept",
          params=(_POINT_ID, Param("hits", "query", {"type": "integer", "enum": [0, 1]},
                                   "1: include every hit's raw record")),
          media=(JSON, http.MSGPACK), errors=(404, 503)),
    Route("GET", "/v1/changes", "getChanges", "changes",
          "the change feed after `since`; waits up to `wait` s for a change",
          params=(Param("since", "query", SEQ, "last seq the client has seen (default 0)"),
                  Param("wait", "query", {"type": "number", "minimum": 0, "maximum": MAX_WAIT_S},
                        "seconds to wait for a change when there is none (default 0)")),
          errors=(503,)),
    Route("GET", "/v1/events", "streamEvents", "events",
          "server-sent events: every rig event as `event: <kind>` with JSON data; "
          f"a comment line every {HEARTBEAT_S:g} s", media=(EVENT_STREAM,)),
    *(
        Route("POST", f"/v1/session/{name}", f"session{name.title()}", "session", doc,
              body=body, errors=(404, 409, 422, 503), action=name)
        for name, (doc, body) in ACTIONS.items()
    ),
)  # fmt: skip


# ---------------------------------------------------------------- validation


class ApiError(Exception):
    """A request the service refuses: status, a short machine code, a sentence."""

    def __init__(
        self, status: int, code: str, message: str, headers: Mapping[str, str] | None = None
    ) -> None:
        super().__init__(message)
        self.status, self.code, self.message = status, code, message
        self.headers = dict(headers or {})


def _invalid(message: str) -> ApiError:
    return ApiError(400, "invalid", message)


def check(value: Any, schema: Mapping[str, Any], where: str) -> None:
    """Raise ApiError(400) naming `where` unless `value` meets `schema`.

    The JSON Schema subset the route table uses: type, enum, properties, required,
    additionalProperties, propertyNames, maxProperties, oneOf (of `required` lists),
    items, minItems, maxItems, minLength, maxLength, pattern, minimum, maximum.
    """
    if "enum" in schema and not any(_same(value, e) for e in schema["enum"]):
        raise _invalid(f"{where}: must be one of {', '.join(map(str, schema['enum']))}")
    kind = schema.get("type")
    if kind == "object":
        _check_object(value, schema, where)
    elif kind == "array":
        if not isinstance(value, list):
            raise _invalid(f"{where}: must be an array")
        if not schema.get("minItems", 0) <= len(value) <= schema.get("maxItems", math.inf):
            raise _invalid(f"{where}: {len(value)} items, allowed {schema.get('minItems', 0)}"
                           f"..{schema.get('maxItems', 'any')}")  # fmt: skip
        for i, item in enumerate(value):
            check(item, schema["items"], f"{where}[{i}]")
    elif kind == "string":
        if not isinstance(value, str):
            raise _invalid(f"{where}: must be a string")
        if len(value) > schema.get("maxLength", math.inf):
            raise _invalid(f"{where}: longer than {schema['maxLength']} characters")
        if "pattern" in schema and not re.fullmatch(schema["pattern"], value):
            raise _invalid(f"{where}: {value[:80]!r} is not {schema.get('description', 'valid')}")
    elif kind in ("integer", "number"):
        ok = isinstance(value, int) or (kind == "number" and isinstance(value, float))
        if not ok or isinstance(value, bool) or not math.isfinite(value):
            raise _invalid(f"{where}: must be {'an integer' if kind == 'integer' else 'a number'}")
        lo, hi = schema.get("minimum", -math.inf), schema.get("maximum", math.inf)
        if not lo <= value <= hi:
            raise _invalid(f"{where}: {value} is outside {lo:g}..{hi:g}")


def _same(value: Any, allowed: Any) -> bool:
    # Same JSON type and value: true is not 1.
    return type(value) is type(allowed) and value == allowed


def _check_object(value: Any, schema: Mapping[str, Any], where: str) -> None:
    if not isinstance(value, dict):
        raise _invalid(f"{where}: must be a JSON object")
    props, extra = schema.get("properties", {}), schema.get("additionalProperties", True)
    for key in schema.get("required", ()):
        if key not in value:
            raise _invalid(f"{where}: {key!r} is required")
    if "oneOf" in schema:
        fits = [alt for alt in schema["oneOf"] if all(k in value for k in alt["required"])]
        if len(fits) != 1:
            names = " or ".join(",".join(alt["required"]) for alt in schema["oneOf"])
            raise _invalid(f"{where}: give exactly one of {names}")
    if len(value) > schema.get("maxProperties", math.inf):
        raise _invalid(f"{where}: more than {schema['maxProperties']} entries")
    for key, item in value.items():
        if "propertyNames" in schema:
            check(key, schema["propertyNames"], f"{where} key")
        if key in props:
            check(item, props[key], f"{where}.{key}")
        elif extra is False:
            raise _invalid(f"{where}: unknown key {key[:80]!r}")
        elif isinstance(extra, Mapping):
            check(item, extra, f"{where}.{key}")


_QUERY_INT = re.compile(r"[0-9]{1,16}")
_QUERY_NUMBER = re.compile(r"[0-9]{1,6}(\.[0-9]{1,6})?")


def _convert(raw: str, p: Param) -> Any:
    """The value of parameter `p` from its text, checked against its schema."""
    kind, where = p.schema.get("type"), f"{p.where} parameter {p.name!r}"
    value: Any = raw
    if kind == "integer":
        if not _QUERY_INT.fullmatch(raw):
            raise _invalid(f"{where}: {raw[:40]!r} is not a non-negative integer")
        value = int(raw)
    elif kind == "number":
        if not _QUERY_NUMBER.fullmatch(raw):
            raise _invalid(f"{where}: {raw[:40]!r} is not a non-negative decimal number")
        value = float(raw)
    check(value, p.schema, where)
    return value


def _no_duplicates(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    out = dict(pairs)
    if len(out) != len(pairs):
        raise ValueError("a key appears twice in one object")
    return out


def _no_constant(name: str) -> Any:
    raise ValueError(f"{name} is not JSON")


def parse_json(raw: bytes) -> Any:
    """Strict JSON: no NaN/Infinity, no duplicate keys; ApiError(400) otherwise."""
    try:
        return json.loads(raw, object_pairs_hook=_no_duplicates, parse_constant=_no_constant)
    except (ValueError, RecursionError) as exc:  # UnicodeDecodeError is a ValueError
        raise ApiError(400, "bad_json", f"the body is not valid JSON: {exc}") from None


# ---------------------------------------------------------------- errors → statuses (ONE place)


def error_of(exc: BaseException) -> Outcome:
    """(status, JSON body, headers) for an exception raised while serving a request."""
    headers: dict[str, str] = {}
    if isinstance(exc, ApiError):
        status, code, text = exc.status, exc.code, exc.message
        headers.update(exc.headers)
    elif isinstance(exc, web.HTTPException):  # aiohttp's own: 404, 405, 413, ...
        status, code = exc.status, _code(exc.status)
        text = re.sub(r"^\d{3}: ", "", exc.text or "") or phrase(status)
        if "Allow" in exc.headers:
            headers["Allow"] = exc.headers["Allow"]
    elif isinstance(exc, records.SchemaError):
        status, code, text = 400, "invalid", str(exc)
    elif isinstance(exc, SessionError):
        status, code, text = 409, "session", str(exc)
    elif isinstance(exc, StoreError):
        status, code, text = 503, "store", str(exc)
    elif isinstance(exc, ConfigError):
        status, code, text = 400, "config", str(exc)
    elif isinstance(exc, TimeoutError):  # a rig or store call that did not answer in time
        status, code, text = 503, "timeout", "the rig did not answer in time; try again"
    elif isinstance(exc, TaprigError):
        status, code, text = 500, "rig", str(exc)
    else:
        log.error("request failed", exc_info=exc)
        status, code, text = 500, "internal", "internal error; see the daemon's log"
    if status == 401:
        return status, {"error": "unauthorized"}, {"WWW-Authenticate": "Bearer", **headers}
    return status, {"error": code, "message": text}, headers


# RFC 9110 §15 reason phrases, written out: Python's own table changed between versions
# (3.13 took up "Content Too Large"), and the committed OpenAPI document must not.
PHRASES: Final = {
    200: "OK", 201: "Created", 400: "Bad Request", 401: "Unauthorized", 404: "Not Found",
    405: "Method Not Allowed", 409: "Conflict", 413: "Content Too Large",
    415: "Unsupported Media Type", 422: "Unprocessable Content", 429: "Too Many Requests",
    500: "Internal Server Error", 503: "Service Unavailable",
}  # fmt: skip


def phrase(status: int) -> str:
    return PHRASES.get(status) or HTTPStatus(status).phrase


def _code(status: int) -> str:
    return phrase(status).lower().replace(" ", "_").replace("-", "_")


# ---------------------------------------------------------------- responses


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


def _test_json(t: TestPlan, full: bool) -> Payload:
    out: Payload = {
        "name": t.name, "roving_mode": t.roving_mode.value, "reference": t.reference,
        "averages": t.averages, "points": len(t.grid), "created_utc": t.created_utc,
        "seq": t.seq,
    }  # fmt: skip
    if full:
        out["grid"] = [dataclasses.asdict(p) for p in t.grid]
        out["meta"] = t.meta
    return out


def _device_json(info: DeviceInfo | None) -> Payload | None:
    if info is None:
        return None
    return {
        "id": info.device_id, "firmware": info.firmware, "rate_hz": info.rate_hz,
        "protocol_version": info.protocol_version,
        "sample_format": info.sample_format.name.lower(),
        "full_scale_v": [c.full_scale_v for c in info.channels],
        "adc_bits": [c.adc_bits for c in info.channels],
    }  # fmt: skip


def _outcome_json(o: HitOutcome) -> Payload:
    return {"point": o.point, "counted": o.counted, "waiting": o.waiting,
            "averages": o.averages, "completed": o.completed is not None}  # fmt: skip


# ---------------------------------------------------------------- OpenAPI


def openapi() -> Payload:
    """The OpenAPI 3.1 document of `ROUTES`."""
    paths: dict[str, Payload] = {}
    for r in ROUTES:
        op: Payload = {"operationId": r.op, "summary": r.summary}
        if r.public:
            op["security"] = []
        if r.params:
            op["parameters"] = [
                {"name": p.name, "in": p.where, "required": p.where == "path",
                 "description": p.doc, "schema": p.schema}
                for p in r.params
            ]  # fmt: skip
        if r.body is not None:
            op["requestBody"] = {"required": True, "content": {JSON: {"schema": r.body}}}
        responses: Payload = {str(r.ok): {"description": phrase(r.ok),
                                          "content": {m: {} for m in r.media}}}  # fmt: skip
        for status in sorted(set(r.errors) | _default_errors(r)):
            responses[str(status)] = {"$ref": f"#/components/responses/{status}"}
        op["responses"] = responses
        paths.setdefault(r.path, {})[r.method.lower()] = op
    statuses = sorted({s for r in ROUTES for s in set(r.errors) | _default_errors(r)})
    return {
        "openapi": "3.1.0",
        "info": {"title": "taprig rig service", "version": str(API_VERSION)},
        "paths": paths,
        "security": [{"bearer": []}],
        "components": {
            "securitySchemes": {"bearer": {"type": "http", "scheme": "bearer"}},
            "schemas": {"Error": {
                "type": "object", "required": ["error"],
                "properties": {"error": {"type": "string"}, "message": {"type": "string"}},
            }},
            "responses": {
                str(s): {"description": phrase(s),
                         "content": {JSON: {"schema": {"$ref": "#/components/schemas/Error"}}}}
                for s in statuses
            },
        },
    }  # fmt: skip


def _default_errors(r: Route) -> set[int]:
    out = {405}
    if not r.public:
        out |= {401, 429, 503}
    if r.params:
        out.add(400)
    if r.body is not None:
        out |= {400, 413, 415}
    return out


def openapi_text() -> str:
    """The document as committed in daemon/openapi.json."""
    return json.dumps(openapi(), indent=2) + "\n"


# ---------------------------------------------------------------- the service


@dataclass(frozen=True, slots=True)
class Call:
    """A request that passed the token check and validation."""

    request: web.Request
    route: Route
    args: dict[str, Any]
    body: dict[str, Any]


@dataclass(slots=True)
class _Remembered:
    fingerprint: str
    outcome: asyncio.Future[Outcome]


class Service:
    """The HTTP service of one running rig. `await async_start()`, then `.port` is bound.

    host, port: where to listen (port 0: any free port). max_body: largest request body in
    bytes (413 beyond). rig_name: reported by /v1/info (default: the configured rig name).
    rig_id: the rig's stable id, reported by /v1/info (default: the one in the state folder).
    heartbeat_s: comment interval on idle event streams. body_cache_bytes: encoded point sets
    kept for the next reader (0: none).
    """

    def __init__(
        self,
        running: RunningRig,
        auth: Auth,
        *,
        host: str = "127.0.0.1",
        port: int = 0,
        max_body: int = 1 << 20,
        rig_name: str | None = None,
        rig_id: str | None = None,
        heartbeat_s: float = HEARTBEAT_S,
        body_cache_bytes: int = BODY_CACHE_BYTES,
    ) -> None:
        self.running, self.auth = running, auth
        self.store, self.rig = running.store, running.rig
        self.host, self.port, self.max_body = host, port, max_body
        self.rig_name = rig_name if rig_name is not None else running.config.rig.name
        self.rig_id = rig_id if rig_id is not None else _rig_id(running.config.store.data_dir)
        self.heartbeat_s = heartbeat_s
        self._runner: web.AppRunner | None = None
        self._loop: asyncio.AbstractEventLoop | None = None
        self._changed = asyncio.Event()
        self._streams: set[asyncio.Queue[bytes | None]] = set()
        self._memory: collections.OrderedDict[str, _Remembered] = collections.OrderedDict()
        self._subscribed = False
        self._closed = False
        self.polls_waiting = 0
        """Long-polls of /v1/changes waiting for a change right now."""
        self._log_filter = auth.log_filter()
        self._bodies = BodyCache(body_cache_bytes)
        self._web: dict[str, page.StaticFile] = {}

    # -- lifecycle (event loop)

    async def async_start(self) -> None:
        """Listen on host:port; a second call does nothing."""
        if self._runner is not None:
            return
        if self._closed:
            raise RuntimeError("the service was closed; make a new one")
        self._loop = asyncio.get_running_loop()
        if not self._subscribed:
            self.rig.subscribe(self._from_rig)
            self._subscribed = True
        for name in REDACTED_LOGGERS:
            logging.getLogger(name).addFilter(self._log_filter)
        self._web = await asyncio.to_thread(page.load)  # the phone page, read once
        runner = web.AppRunner(self.make_app(), access_log_format=ACCESS_LOG_FORMAT,
                               shutdown_timeout=SHUTDOWN_S)  # fmt: skip
        await runner.setup()
        try:
            await web.TCPSite(runner, self.host, self.port).start()
        except BaseException:
            await runner.cleanup()
            raise
        self._runner = runner
        self.port = int(runner.addresses[0][1])
        log.info("service on http://%s:%d%s", self.host, self.port, PREFIX)

    async def async_close(self) -> None:
        """End event streams and long-polls, stop listening. Safe to call twice."""
        if self._closed:
            return
        self._closed = True
        for q in list(self._streams):
            self._drop(q)
        self._wake()
        if self._runner is not None:
            await self._runner.cleanup()
        for name in REDACTED_LOGGERS:
            logging.getLogger(name).removeFilter(self._log_filter)

    def make_app(self) -> web.Application:
        """The aiohttp application of `ROUTES` (subclasses may add routes before start)."""
        app = web.Application(client_max_size=self.max_body, middlewares=[self._errors])
        for route in ROUTES:
            app.router.add_route(route.method, route.path, self._bind(route))
        if self._web:
            page.add_routes(app, self._web)  # outside /v1: static files, no token
        return app

    # -- rig events (rig thread → loop)

    def _from_rig(self, event: RigEvent) -> None:
        loop = self._loop
        if loop is None or self._closed:
            return
        # The loop may close between the check and the call; nobody is listening then.
        with contextlib.suppress(RuntimeError):
            loop.call_soon_threadsafe(self._dispatch, event)

    def _dispatch(self, event: RigEvent) -> None:
        try:
            frame = f"event: {event.kind}\ndata: {dumps(event.data)}\n\n".encode()
        except (TypeError, ValueError):
            log.exception("rig event %s is not JSON; not sent", event.kind)
            return
        for q in list(self._streams):
            try:
                q.put_nowait(frame)
            except asyncio.QueueFull:
                # A reader too slow to keep up is cut off; it reconnects and reads /v1/state.
                self._drop(q)
        if event.kind == "completed":
            self._wake()

    def _drop(self, q: asyncio.Queue[bytes | None]) -> None:
        self._streams.discard(q)
        while not q.empty():
            q.get_nowait()
        q.put_nowait(None)

    def _wake(self) -> None:
        self._changed.set()
        self._changed = asyncio.Event()

    # -- plumbing

    @web.middleware
    async def _errors(
        self, request: web.Request, handler: Callable[[web.Request], Awaitable[web.StreamResponse]]
    ) -> web.StreamResponse:
        try:
            return await handler(request)
        except ConnectionError:
            raise  # the client went away: nothing to answer
        except Exception as exc:
            status, payload, headers = error_of(exc)
            return json_response(payload, status, headers)

    def _bind(self, route: Route) -> Callable[[web.Request], Awaitable[web.StreamResponse]]:
        serve: Callable[[Call], Awaitable[web.StreamResponse]] = getattr(
            self, f"_on_{route.handler}"
        )

        async def handler(request: web.Request) -> web.StreamResponse:
            if not route.public:
                await self.authorize(request)
            args = _params(route, request)
            body = await _body(route, request) if route.body is not None else {}
            return await serve(Call(request, route, args, body))

        return handler

    async def authorize(self, request: web.Request) -> None:
        """Raise ApiError 401, 429 or 503 unless the request carries the rig's token."""
        peer = request.remote or ""
        # Auth.check stats the token file: a syscall, so off the loop like any other.
        verdict = await asyncio.to_thread(
            self.auth.check, request.headers.get("Authorization"), peer
        )
        status = verdict.http_status
        if status == 429:
            wait = max(1, math.ceil(self.auth.retry_after(peer)))  # RFC 9110 §10.2.3: seconds
            raise ApiError(429, "rate_limited", f"too many failed attempts; retry in {wait} s",
                           {"Retry-After": str(wait)})  # fmt: skip
        if status == 503:
            raise ApiError(503, "unavailable", "the rig's token file cannot be used; see its log")
        if status != 200:
            raise ApiError(401, "unauthorized", "")

    async def _once(
        self, what: str, body: Payload, act: Callable[[], Awaitable[Outcome]]
    ) -> web.Response:
        """Run `act` once per request_id; a retry awaits and returns the first outcome."""
        rid = body.get("request_id")
        if rid is None:
            return _answer(await _settle(act))
        fingerprint = json.dumps([what, body], sort_keys=True)
        entry = self._memory.get(rid)
        if entry is None:
            entry = _Remembered(fingerprint, asyncio.ensure_future(_settle(act)))
            self._memory[rid] = entry
            while len(self._memory) > REMEMBERED:
                self._memory.popitem(last=False)
        elif entry.fingerprint != fingerprint:
            raise ApiError(422, "request_id_reused",
                           f"request_id {rid!r} was used for a different request")  # fmt: skip
        else:
            self._memory.move_to_end(rid)
        return _answer(await asyncio.shield(entry.outcome))

    # -- public

    async def _on_info(self, call: Call) -> web.StreamResponse:
        return json_response({
            "rig": self.rig_name, "rig_id": self.rig_id, "api_version": API_VERSION,
            "schema_version": records.SCHEMA_VERSION, "daemon_version": __version__,
        })  # fmt: skip

    async def _on_health(self, call: Call) -> web.StreamResponse:
        try:
            await asyncio.to_thread(self.store.last_seq)
            store_ok = True
        except TaprigError:
            store_ok = False
        payload = {"status": "ok" if store_ok else "degraded", "store": store_ok,
                   "link": self.rig.link_state.value}  # fmt: skip
        return json_response(payload, 200 if store_ok else 503)

    async def _on_openapi(self, call: Call) -> web.StreamResponse:
        return web.Response(text=openapi_text(), content_type=JSON)

    # -- reading

    async def _on_state(self, call: Call) -> web.StreamResponse:
        snapshot = await asyncio.to_thread(self.rig.snapshot)
        last_seq = await asyncio.to_thread(self.store.last_seq)
        stats = self.rig.stats
        return json_response({
            "rig": self.rig_name, "session": snapshot, "device": _device_json(self.rig.info),
            "hits_seen": stats.hits_seen, "hits_while_disarmed": stats.hits_while_disarmed,
            "last_seq": last_seq, "accept": self.running.config.capture.accept.value,
            "channels": [{"label": c.label, "role": str(c.role)}
                         for c in sorted(self.running.config.channels, key=lambda c: c.index)],
        })  # fmt: skip

    async def _on_last_hit(self, call: Call) -> web.StreamResponse:
        view = self.rig.last_hit
        if view is None:
            raise ApiError(404, "no_hit", "no hit has been captured yet")
        return json_response(view)

    async def _on_tests(self, call: Call) -> web.StreamResponse:
        plans = await asyncio.to_thread(self.store.list_tests)
        return _reply(call, {"tests": [_test_obj(t) for t in plans]})

    async def _on_test(self, call: Call) -> web.StreamResponse:
        return _reply(call, _test_obj(await self._plan(call.args["name"])))

    async def _on_points(self, call: Call) -> web.StreamResponse:
        test = call.args.get("test")
        if test is not None:
            await self._plan(test)  # 404 for a test that does not exist
        rows = await asyncio.to_thread(self.store.list_point_sets, test, call.args.get("since", 0))
        return _reply(call, {"points": [objects.point_set_summary_json(s) for s in rows]})

    async def _on_point(self, call: Call) -> web.StreamResponse:
        pid, with_hits = call.args["id"], bool(call.args.get("hits", 0))
        key = (pid, with_hits, http.wants_msgpack(call.request.headers.get("Accept")))
        encoded = self._bodies.get(key)
        if encoded is None:
            try:
                encoded = await asyncio.to_thread(encode_point_set, self.store, *key)
            except StoreError:
                ids = {s.id for s in await asyncio.to_thread(self.store.list_point_sets)}
                if pid not in ids:
                    raise ApiError(404, "not_found", f"no point set with id {pid}") from None
                raise
            self._bodies.put(key, encoded)
        body, media, digest = encoded
        return web.Response(body=body, content_type=media, headers={"Content-Digest": digest})

    async def _on_changes(self, call: Call) -> web.StreamResponse:
        since, wait = call.args.get("since", 0), call.args.get("wait", 0.0)
        loop = asyncio.get_running_loop()
        deadline = loop.time() + wait
        while True:
            woken = self._changed  # taken before the query: a commit after it still wakes us
            changes = await asyncio.to_thread(self.store.changes, since, CHANGES_LIMIT)
            left = deadline - loop.time()
            if changes or left <= 0 or self._closed:
                break
            self.polls_waiting += 1
            try:
                with contextlib.suppress(TimeoutError):
                    await asyncio.wait_for(woken.wait(), left)
            finally:
                self.polls_waiting -= 1
            if self._closed:
                break  # answer now, with nothing new, so that the close need not wait
        objs = [objects.change_to_obj(records.change_from_record(c)) for c in changes]
        last = changes[-1].seq if changes else since
        return _reply(call, {"changes": objs, "last_seq": last,
                             "more": len(changes) == CHANGES_LIMIT})  # fmt: skip

    async def _on_events(self, call: Call) -> web.StreamResponse:
        q: asyncio.Queue[bytes | None] = asyncio.Queue(STREAM_QUEUE)
        # Subscribed before the headers go out: once a client has the response, it misses
        # no event.
        self._streams.add(q)
        resp = web.StreamResponse(headers={"Cache-Control": "no-cache"})
        resp.content_type = EVENT_STREAM
        try:
            await resp.prepare(call.request)
            await resp.write(b"retry: 2000\n\n")  # reconnection delay, ms (HTML §9.2)
            while not self._closed:
                try:
                    frame = await asyncio.wait_for(q.get(), self.heartbeat_s)
                except TimeoutError:
                    frame = b": heartbeat\n\n"
                if frame is None:
                    break
                await resp.write(frame)
        except ConnectionError:
            pass  # the client left
        finally:
            self._streams.discard(q)
        return resp

    # -- writing

    async def _on_create_test(self, call: Call) -> web.StreamResponse:
        return await self._once("create_test", call.body, lambda: self._create(call.body))

    async def _create(self, body: Payload) -> Outcome:
        grid = _grid(body)
        labels = {p.label for p in grid}
        reference = body.get("reference", grid[0].label)
        if reference not in labels:
            raise _invalid(f"body.reference: {reference!r} is not a label of the grid")
        known = {c.label for c in self.running.config.response_channels}
        sensors = body.get("sensor_points", {})
        if set(sensors) - known:
            raise _invalid(f"body.sensor_points: {sorted(set(sensors) - known)} are not "
                           f"response channels (those are {sorted(known)})")  # fmt: skip
        name = body["name"]
        if await self._exists(name):
            raise ApiError(409, "exists", f"a test named {name!r} already exists")
        try:
            await asyncio.to_thread(
                self.rig.create_test, name, grid, RovingMode(body.get("roving_mode", "hammer")),
                reference, body.get("averages"), sensors,
            )  # fmt: skip
        except StoreError:
            if await self._exists(name):  # created meanwhile by another request
                raise ApiError(409, "exists", f"a test named {name!r} already exists") from None
            raise
        self._wake()
        plan = await self._plan(name)
        return 201, _test_obj(plan), {"Location": f"{PREFIX}/tests/{name}"}

    async def _on_session(self, call: Call) -> web.StreamResponse:
        action = call.route.action
        assert action is not None
        return await self._once(f"session/{action}", call.body,
                                lambda: self._act(action, call.body))  # fmt: skip

    async def _act(self, action: str, body: Payload) -> Outcome:
        rig = self.rig
        simple: dict[str, Callable[[], None]] = {
            "arm": rig.arm, "disarm": rig.disarm, "redo": rig.redo,
            "next": functools.partial(rig.step, 1), "previous": functools.partial(rig.step, -1),
        }  # fmt: skip
        out: Payload = {"action": action, "request_id": body["request_id"]}
        if action == "select":
            await self._plan(body["test"])  # 404 for an unknown test
            await asyncio.to_thread(rig.select_test, body["test"])
        elif action == "goto":
            await self._need_point(body["point"])
            await asyncio.to_thread(rig.goto, body["point"])
        elif action in ("accept", "reject"):
            decide = rig.accept if action == "accept" else rig.reject
            out["outcome"] = _outcome_json(await asyncio.to_thread(decide))
        else:
            await asyncio.to_thread(simple[action])
        out["state"] = await asyncio.to_thread(rig.snapshot)
        return 200, out, {}

    # -- helpers

    async def _plan(self, name: str) -> TestPlan:
        """The stored test `name`; ApiError 404 if there is none."""
        try:
            return await asyncio.to_thread(self.store.get_test, name)
        except StoreError:
            if not await self._exists(name):
                raise ApiError(404, "not_found", f"no test named {name!r}") from None
            raise

    async def _exists(self, name: str) -> bool:
        return name in {t.name for t in await asyncio.to_thread(self.store.list_tests)}

    async def _need_point(self, label: str) -> None:
        test = (await asyncio.to_thread(self.rig.snapshot))["test"]
        if test is None:
            raise SessionError("no test is selected")
        if label not in {p.label for p in (await self._plan(test)).grid}:
            raise ApiError(404, "not_found", f"point {label!r} is not on the grid of {test!r}")


# ---------------------------------------------------------------- handler helpers


def _params(route: Route, request: web.Request) -> dict[str, Any]:
    """The route's path and query parameters, converted and checked; unknown ones refused."""
    known = {p.name for p in route.params if p.where == "query"}
    unknown = set(request.query) - known
    if unknown:
        raise _invalid(f"unknown query parameter {sorted(unknown)[0][:40]!r}")
    out: dict[str, Any] = {}
    for p in route.params:
        if p.where == "path":
            out[p.name] = _convert(request.match_info[p.name], p)
            continue
        values = request.query.getall(p.name, [])
        if len(values) > 1:
            raise _invalid(f"query parameter {p.name!r} given {len(values)} times")
        if values:
            out[p.name] = _convert(values[0], p)
    return out


async def _body(route: Route, request: web.Request) -> dict[str, Any]:
    """The JSON body, checked against the route's schema (413 beyond client_max_size)."""
    assert route.body is not None
    raw = await request.read()
    if raw and request.content_type != JSON:
        raise ApiError(415, "unsupported_media_type", f"send the body as {JSON}")
    value = parse_json(raw) if raw else {}  # no body: then the schema says what is missing
    check(value, route.body, "body")
    assert isinstance(value, dict)
    return value


def _grid(body: Payload) -> list[GridPoint]:
    if "grid" in body:
        grid = [GridPoint(p["label"], float(p["x"]), float(p["y"]), float(p["z"]),
                          p.get("direction", "+z")) for p in body["grid"]]  # fmt: skip
        labels = [p.label for p in grid]
        if len(set(labels)) != len(labels):
            raise _invalid("body.grid: labels must be distinct")
        return grid
    try:
        grid = import_grid_csv(body["grid_csv"])
    except StoreError as exc:
        raise _invalid(f"body.grid_csv: {exc}") from None
    for i, p in enumerate(grid):
        check(p.label, LABEL, f"body.grid_csv point {i + 1} label")
        check(p.x, COORD, f"body.grid_csv point {i + 1} x")
        check(p.y, COORD, f"body.grid_csv point {i + 1} y")
        check(p.z, COORD, f"body.grid_csv point {i + 1} z")
    return grid


def _test_obj(plan: TestPlan) -> Payload:
    return objects.test_to_obj(records.test_from_record(plan))


def _reply(call: Call, obj: Payload) -> web.Response:
    """`obj` as msgpack when the client prefers it, else as JSON."""
    if http.wants_msgpack(call.request.headers.get("Accept")):
        return web.Response(body=codec.pack(obj), content_type=http.MSGPACK)
    return json_response(obj)


def encode_point_set(store: Store, pid: int, with_hits: bool, as_msgpack: bool) -> Encoded:
    """(body, content type, Content-Digest value) of a stored point set, per the wire schema.

    One worker-thread call. The msgpack body without raw hits was written at commit and is
    served as stored; anything else is read, encoded and checksummed here.
    """
    if as_msgpack and not with_hits:
        stored = store.get_wire_body(pid, records.SCHEMA_VERSION)
        if stored is not None:
            digest, body = stored
            return body, http.MSGPACK, digest
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
    """JSON of a `objects.point_set_to_obj` object: each array's bytes become nested lists.

    A real array is ``{"dtype", "shape", "values"}``, a complex one ``{"dtype", "shape",
    "real", "imag"}``; a non-finite value is null. Finite values round-trip exactly (Python
    writes the shortest text that reads back as the same double).
    """
    out = dict(obj)
    for key, value in obj.items():
        if isinstance(value, dict) and set(value) == {"dtype", "shape", "data"}:
            out[key] = _array_json(value)
    out["hits"] = [
        {**h, "data": None if h["data"] is None else _array_json(h["data"])} for h in obj["hits"]
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
    if bool(np.isfinite(arr).all()):
        return arr.astype(np.float64).tolist()
    out = arr.astype(np.float64).astype(object)
    out[~np.isfinite(arr)] = None
    return out.tolist()


async def _settle(act: Callable[[], Awaitable[Outcome]]) -> Outcome:
    """The outcome of `act`, an error mapped to its status like any other."""
    try:
        return await act()
    except Exception as exc:
        return error_of(exc)


def _answer(outcome: Outcome) -> web.Response:
    status, payload, headers = outcome
    return json_response(payload, status, headers)


# ---------------------------------------------------------------- command line


def main(argv: Sequence[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="taprig rig service")
    parser.add_argument("--openapi", action="store_true", help="print the OpenAPI document")
    args = parser.parse_args(argv)
    if args.openapi:
        sys.stdout.write(openapi_text())
    else:
        parser.print_help()


if __name__ == "__main__":
    main()
