"""Strict checks of plain decoded values (what msgpack or JSON gave back), for `schema.objects`.

Each check takes a value and `where`, the dotted path of the field (``hits[2].utc``), and
returns the value as a plain Python type or raises `SchemaError` naming that path and what
was expected, so a reader never works on half-understood data.
"""

from __future__ import annotations

import math
import operator
from collections.abc import Sequence
from typing import Any, Final, NoReturn

import numpy as np

from .records import READ_VERSIONS, SCHEMA_VERSION, SchemaError

MAX_NESTING: Final = 32
"""Deepest nesting of lists and maps accepted in `meta`."""

_INT64 = range(-(2**63), 2**64)  # what msgpack can carry as an integer


def fail(where: str, message: str) -> NoReturn:
    raise SchemaError(message, where or None)


def integer(value: Any, where: str, minimum: int | None = None) -> int:
    # operator.index takes int and numpy integers but no float or str; bool is refused apart.
    if isinstance(value, bool):
        fail(where, "expected an integer, got a bool")
    try:
        n = operator.index(value)
    except TypeError:
        fail(where, f"expected an integer, got {type(value).__name__}")
    if n not in _INT64:
        fail(where, f"integer {n} out of the 64-bit range")
    if minimum is not None and n < minimum:
        fail(where, f"must be at least {minimum}, got {n}")
    return n


def number(value: Any, where: str, finite: bool = False) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float | np.floating | np.integer):
        fail(where, f"expected a number, got {type(value).__name__}")
    x = float(value)
    if finite and not math.isfinite(x):
        fail(where, f"must be finite, got {x}")
    return x


def boolean(value: Any, where: str) -> bool:
    if not isinstance(value, bool | np.bool_):
        fail(where, f"expected true or false, got {type(value).__name__}")
    return bool(value)


def text(value: Any, where: str, nonempty: bool = False) -> str:
    if not isinstance(value, str):
        fail(where, f"expected a string, got {type(value).__name__}")
    if nonempty and not value:
        fail(where, "must not be empty")
    return str(value)  # a plain str also for a str subclass (an enum member)


def choice(value: Any, where: str, allowed: frozenset[str]) -> str:
    s = text(value, where)
    if s not in allowed:
        fail(where, f"{s!r} is not one of {', '.join(sorted(allowed))}")
    return s


def sequence(value: Any, where: str) -> Sequence[Any]:
    if not isinstance(value, list | tuple):
        fail(where, f"expected an array, got {type(value).__name__}")
    return value


def texts(value: Any, where: str) -> tuple[str, ...]:
    return tuple(text(v, f"{where}[{i}]") for i, v in enumerate(sequence(value, where)))


def plain(value: Any, where: str, depth: int = 0) -> Any:
    """A copy of `value` if it is plain JSON (tuples become lists); SchemaError otherwise."""
    if depth > MAX_NESTING:
        fail(where, f"nested deeper than {MAX_NESTING}")
    if value is None or isinstance(value, bool | str):
        return value
    if isinstance(value, int):
        return integer(value, where)
    if isinstance(value, float):
        return number(value, where, finite=True)
    if isinstance(value, list | tuple):
        return [plain(v, f"{where}[{i}]", depth + 1) for i, v in enumerate(value)]
    if isinstance(value, dict):
        out: dict[str, Any] = {}
        for k, v in value.items():
            if not isinstance(k, str):
                fail(where, f"key {k!r} is not a string")
            out[k] = plain(v, f"{where}.{k}", depth + 1)
        return out
    fail(where, f"{type(value).__name__} is not a plain JSON value")


def meta_map(value: Any, where: str) -> dict[str, Any]:
    if not isinstance(value, dict):
        fail(where, f"expected a map, got {type(value).__name__}")
    meta: dict[str, Any] = plain(value, where)
    return meta


def top_fields(obj: Any, where: str, names: tuple[str, ...]) -> dict[str, Any]:
    """`obj` as a dict with exactly the keys `names` plus ``schema``, checked."""
    return exact(obj, where, (*names, "schema"), top=True)


def exact(obj: Any, where: str, names: tuple[str, ...], top: bool = False) -> dict[str, Any]:
    if not isinstance(obj, dict):
        fail(where, f"expected a map, got {type(obj).__name__}")
    prefix = f"{where}." if where else ""
    for key in obj:
        if key not in names:
            fail(f"{prefix}{key}", "unexpected field")
    for key in names:
        if key not in obj:
            fail(f"{prefix}{key}", "missing field")
    if top and integer(obj["schema"], f"{prefix}schema") not in READ_VERSIONS:
        fail(
            f"{prefix}schema",
            f"schema version {obj['schema']} is not one this side reads (it writes "
            f"{SCHEMA_VERSION}, reads {', '.join(map(str, sorted(READ_VERSIONS)))}); update "
            "the older of client and rig",
        )
    return obj


def at(where: str, key: str) -> str:
    return f"{where}.{key}" if where else key
