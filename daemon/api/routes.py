"""The route table of the rig's HTTP service: every endpoint, its parameters and its body schema.

`ROUTES` is the single source of truth: the service registers its handlers from it
(daemon/api/service.py), every request is validated against the schemas it declares
(daemon/api/validate.py), and the OpenAPI document is generated from it (daemon/api/openapi.py).
Schemas are JSON Schema 2020-12, in the subset validate.py checks.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Final

from aiohttp import web

from taprig.schema import http
from taprig.schema.outline import MAX_CHARS as OUTLINE_MAX_CHARS

from ..grid import MAX_POINTS
from ..records import RovingMode

PREFIX: Final = "/v1"
JSON: Final = "application/json"
EVENT_STREAM: Final = "text/event-stream"
MAX_WAIT_S: Final = 30.0  # longest long-poll of /v1/changes, seconds
# A comment line on an idle event stream, seconds: often enough that a phone notices lost
# Wi-Fi within 5 s (daemon/web/link.js gives up after 4 s of silence); a few bytes each.
HEARTBEAT_S: Final = 1.5
Payload = dict[str, Any]

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
PLACE: Final[Payload] = {
    "type": "string",
    "maxLength": 96,
    "pattern": r"^[A-Za-z0-9_.,+eE -]+$",
    "description": "a grid point label, or coordinates x,y,z in metres",
}
DIRECTION: Final[Payload] = {
    "type": "string",
    "maxLength": 96,
    "pattern": r"^[0-9xyzeE.,+ -]+$",
    "description": "+x, -x, +y, -y, +z, -z, or a vector a,b,c",
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
        "grid": {"type": "array", "minItems": 1, "maxItems": MAX_POINTS, "items": GRID_POINT},
        "grid_csv": {
            "type": "string",
            "maxLength": 1 << 20,
            "description": "CSV text with header label,x,y,z[,direction], metres; "
            f"at most {MAX_POINTS} points",
        },
        "outline": {
            "type": "string",
            "maxLength": OUTLINE_MAX_CHARS,
            "description": "the structure's faces and lines over the grid (outline text: "
            "point, face, points, tri, quad, line records); kept with the test",
        },
        "roving_mode": {"type": "string", "enum": [m.value for m in RovingMode]},
        "reference": {
            **PLACE,
            "description": "roving sensor: the hammer point (default the first grid point); "
            "roving hammer: where the first sensor sits (as `sensors` says it)",
        },
        "averages": {"type": "integer", "minimum": 1, "maximum": 1000},
        "sensor_points": {
            "type": "object",
            "maxProperties": 64,
            "propertyNames": LABEL,
            "additionalProperties": PLACE,
            "description": "response channel label -> where its sensor sits (a grid label, "
            "or x,y,z in metres)",
        },
        "sensors": {
            "type": "object",
            "maxProperties": 64,
            "propertyNames": LABEL,
            "additionalProperties": {
                "type": "object",
                "additionalProperties": False,
                "required": ["at"],
                "properties": {"at": PLACE, "direction": DIRECTION},
            },
            "description": "response channel label -> {at: a grid label or x,y,z in metres, "
            "direction: +x..-z or a,b,c}; a roving-hammer test without them is stored with "
            "sensors_missing, never a guessed place",
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
    "undo": _control(
        "take back the last counted tap of the current point (a wrong accept); "
        "409 when none is left or the point is complete"
    ),
    "remeasure": _control(
        "open a point already measured for a new version, deliberately; the "
        "cursor goes there and the old version stays stored",
        point=LABEL,
    ),
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
    """One endpoint: its handler is `Service._on_<handler>`; public routes need no token.

    token_in_worker: the handler checks the token itself, in the one worker-thread call that
    also reads the store (one thread hop per request instead of two: the point-set route,
    which every workstation calls once per point set).
    """

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
    token_in_worker: bool = False


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
          "one point set: JSON (arrays as lists) or msgpack (typed arrays) by Accept; "
          "spectra float32/complex64; a hit's raw record as the device's int16/int32 codes "
          "(float32 SI values from a device without codes) with `scale`, SI units per count "
          "of each channel (schema 3), or as stored by an older schema",
          params=(_POINT_ID, Param("hits", "query", {"type": "integer", "enum": [0, 1]},
                                   "1: include every hit's raw record and its scale (several "
                                   "times the bytes; SI values = data × scale); 0 (default): "
                                   "hits without records, the msgpack body stored at commit, "
                                   "sent as stored")),
          media=(JSON, http.MSGPACK), errors=(404, 503), token_in_worker=True),
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


@dataclass(frozen=True, slots=True)
class Call:
    """A request that passed the token check and validation: its route, arguments and body."""

    request: web.Request
    route: Route
    args: dict[str, Any]
    body: dict[str, Any]
