"""Validation of requests against the route table's schemas, and strict JSON.

Every path parameter, query parameter and JSON body is checked here before a handler sees
it; a value that does not fit is refused with ApiError 400 naming where it was found.
"""

from __future__ import annotations

import asyncio
import json
import math
import re
from collections.abc import Mapping
from typing import Any

from aiohttp import web

from ..errors import GridError
from ..grid import MAX_POINTS, check_outline, import_grid_csv
from ..records import GridPoint
from .errors import ApiError, invalid
from .routes import COORD, JSON, LABEL, Param, Payload, Route

INLINE_BODY_BYTES = 16 * 1024  # bodies up to this size are parsed on the event loop


def check(value: Any, schema: Mapping[str, Any], where: str) -> None:
    """Raise ApiError(400) naming `where` unless `value` meets `schema`.

    The JSON Schema subset the route table uses: type, enum, properties, required,
    additionalProperties, propertyNames, maxProperties, oneOf (of `required` lists),
    items, minItems, maxItems, minLength, maxLength, pattern, minimum, maximum.
    """
    if "enum" in schema and not any(_same(value, e) for e in schema["enum"]):
        raise invalid(f"{where}: must be one of {', '.join(map(str, schema['enum']))}")
    kind = schema.get("type")
    if kind == "object":
        _check_object(value, schema, where)
    elif kind == "array":
        if not isinstance(value, list):
            raise invalid(f"{where}: must be an array")
        if not schema.get("minItems", 0) <= len(value) <= schema.get("maxItems", math.inf):
            raise invalid(f"{where}: {len(value)} items, allowed {schema.get('minItems', 0)}"
                           f"..{schema.get('maxItems', 'any')}")  # fmt: skip
        for i, item in enumerate(value):
            check(item, schema["items"], f"{where}[{i}]")
    elif kind == "string":
        if not isinstance(value, str):
            raise invalid(f"{where}: must be a string")
        if len(value) > schema.get("maxLength", math.inf):
            raise invalid(f"{where}: longer than {schema['maxLength']} characters")
        if "pattern" in schema and not re.fullmatch(schema["pattern"], value):
            raise invalid(f"{where}: {value[:80]!r} is not {schema.get('description', 'valid')}")
    elif kind in ("integer", "number"):
        _check_number(value, schema, where)


def _check_number(value: Any, schema: Mapping[str, Any], where: str) -> None:
    kind = schema.get("type")
    ok = isinstance(value, int) or (kind == "number" and isinstance(value, float))
    # An int is finite however large (math.isfinite would overflow converting 10**400).
    if not ok or isinstance(value, bool) or (isinstance(value, float) and not math.isfinite(value)):
        raise invalid(f"{where}: must be {'an integer' if kind == 'integer' else 'a number'}")
    lo, hi = schema.get("minimum", -math.inf), schema.get("maximum", math.inf)
    if not lo <= value <= hi:  # Python compares int and float exactly, at any size
        shown = str(value) if abs(value) < 10**15 else f"a number of {len(str(abs(value)))} digits"
        raise invalid(f"{where}: {shown} is outside {lo:g}..{hi:g}")


def _same(value: Any, allowed: Any) -> bool:
    # Same JSON type and value: true is not 1.
    return type(value) is type(allowed) and value == allowed


def _check_object(value: Any, schema: Mapping[str, Any], where: str) -> None:
    if not isinstance(value, dict):
        raise invalid(f"{where}: must be a JSON object")
    props, extra = schema.get("properties", {}), schema.get("additionalProperties", True)
    for key in schema.get("required", ()):
        if key not in value:
            raise invalid(f"{where}: {key!r} is required")
    if "oneOf" in schema:
        fits = [alt for alt in schema["oneOf"] if all(k in value for k in alt["required"])]
        if len(fits) != 1:
            names = " or ".join(",".join(alt["required"]) for alt in schema["oneOf"])
            raise invalid(f"{where}: give exactly one of {names}")
    if len(value) > schema.get("maxProperties", math.inf):
        raise invalid(f"{where}: more than {schema['maxProperties']} entries")
    for key, item in value.items():
        if "propertyNames" in schema:
            check(key, schema["propertyNames"], f"{where} key")
        if key in props:
            check(item, props[key], f"{where}.{key}")
        elif extra is False:
            raise invalid(f"{where}: unknown key {key[:80]!r}")
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
            raise invalid(f"{where}: {raw[:40]!r} is not a non-negative integer")
        value = int(raw)
    elif kind == "number":
        if not _QUERY_NUMBER.fullmatch(raw):
            raise invalid(f"{where}: {raw[:40]!r} is not a non-negative decimal number")
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


def params(route: Route, request: web.Request) -> dict[str, Any]:
    """The route's path and query parameters, converted and checked; unknown ones refused."""
    known = {p.name for p in route.params if p.where == "query"}
    unknown = set(request.query) - known
    if unknown:
        raise invalid(f"unknown query parameter {sorted(unknown)[0][:40]!r}")
    out: dict[str, Any] = {}
    for p in route.params:
        if p.where == "path":
            out[p.name] = _convert(request.match_info[p.name], p)
            continue
        values = request.query.getall(p.name, [])
        if len(values) > 1:
            raise invalid(f"query parameter {p.name!r} given {len(values)} times")
        if values:
            out[p.name] = _convert(values[0], p)
    return out


async def body(route: Route, request: web.Request, timeout_s: float) -> dict[str, Any]:
    """The JSON body, checked against the route's schema (413 beyond client_max_size).

    The whole body must arrive within `timeout_s` seconds (408 otherwise: a client dribbling
    it out holds a connection for nothing). A large body is parsed and checked on a worker
    thread, so the event loop stays free.
    """
    schema = route.body
    assert schema is not None
    try:
        async with asyncio.timeout(timeout_s):
            raw = await request.read()
    except TimeoutError:
        raise ApiError(
            408, "request_timeout", f"the request body did not arrive within {timeout_s:g} s"
        ) from None
    if raw and request.content_type != JSON:
        raise ApiError(415, "unsupported_media_type", f"send the body as {JSON}")
    if len(raw) > INLINE_BODY_BYTES:
        return await asyncio.to_thread(_parsed, raw, schema)
    return _parsed(raw, schema)


def _parsed(raw: bytes, schema: Payload) -> dict[str, Any]:
    value = parse_json(raw) if raw else {}  # no body: then the schema says what is missing
    check(value, schema, "body")
    assert isinstance(value, dict)
    return value


def outline(body: Payload, grid: list[GridPoint]) -> str | None:
    """The body's outline text checked against its grid; 400 naming the line otherwise."""
    text = body.get("outline")
    if text is None:
        return None
    try:
        return check_outline(text, grid, "body.outline")
    except GridError as exc:
        raise invalid(str(exc)) from None


def grid(body: Payload) -> list[GridPoint]:
    """The grid of a create-test body, from its list or its CSV text (at most MAX_POINTS).

    Blocking work for a large grid: call it on a worker thread.
    """
    if "grid" in body:
        grid = [GridPoint(p["label"], float(p["x"]), float(p["y"]), float(p["z"]),
                          p.get("direction", "+z")) for p in body["grid"]]  # fmt: skip
        labels = [p.label for p in grid]
        if len(set(labels)) != len(labels):
            raise invalid("body.grid: labels must be distinct")
        return grid
    try:
        grid = import_grid_csv(body["grid_csv"], max_points=MAX_POINTS)
    except GridError as exc:
        raise invalid(f"body.grid_csv: {exc}") from None
    for i, p in enumerate(grid):
        check(p.label, LABEL, f"body.grid_csv point {i + 1} label")
        check(p.x, COORD, f"body.grid_csv point {i + 1} x")
        check(p.y, COORD, f"body.grid_csv point {i + 1} y")
        check(p.z, COORD, f"body.grid_csv point {i + 1} z")
    return grid
