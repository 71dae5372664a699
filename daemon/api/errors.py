"""Errors → HTTP statuses, in one place (`error_of`).

`ApiError` is a refusal the service itself decides (bad input, no token, too many tries);
everything else is the daemon's own exception tree (daemon/errors.py), mapped here by type:
a `NotFound` is 404, an `AlreadyExists` or a `SessionError` 409, a `StoreError` 503.
"""

from __future__ import annotations

import logging
import re
from collections.abc import Mapping
from http import HTTPStatus
from typing import Any, Final

from aiohttp import web

from taprig.schema import records

from ..errors import AlreadyExists, ConfigError, NotFound, SessionError, StoreError, TaprigError

log = logging.getLogger(__name__)

Outcome = tuple[int, dict[str, Any], dict[str, str]]
"""A handler's answer before it becomes a response: (status, JSON body, headers)."""


class ApiError(Exception):
    """A request the service refuses: status, a short machine code, a sentence."""

    def __init__(
        self, status: int, code: str, message: str, headers: Mapping[str, str] | None = None
    ) -> None:
        super().__init__(message)
        self.status, self.code, self.message = status, code, message
        self.headers = dict(headers or {})


def invalid(message: str) -> ApiError:
    """A 400 refusal naming what is wrong with the request."""
    return ApiError(400, "invalid", message)


# The daemon's own errors, most specific first: (type, status, code).
_BY_TYPE: Final[tuple[tuple[type[BaseException], int, str], ...]] = (
    (records.SchemaError, 400, "invalid"),
    (NotFound, 404, "not_found"),
    (AlreadyExists, 409, "exists"),
    (SessionError, 409, "session"),
    (StoreError, 503, "store"),
    (ConfigError, 400, "config"),
    (TaprigError, 500, "rig"),
)


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
    elif isinstance(exc, TimeoutError):  # a rig or store call that did not answer in time
        status, code, text = 503, "timeout", "the rig did not answer in time; try again"
    else:
        status, code = next(((s, c) for t, s, c in _BY_TYPE if isinstance(exc, t)),
                            (500, "internal"))  # fmt: skip
        text = str(exc)
        if code == "internal":
            log.error("request failed", exc_info=exc)
            text = "internal error; see the daemon's log"
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
