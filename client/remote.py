"""Talk to one rig over HTTP /v1: blocking calls on one kept-alive connection.

`RigClient` is what every client command uses: JSON for listings and control, msgpack for
point sets, whose bodies are checked against the rig's Content-Digest before anyone sees
them. The standard library's http.client is enough here and keeps the client light; one
`RigClient` belongs to one thread.

Errors: `RigError` (the rig answered with an error: status, code, message), `RigUnreachable`
(no answer: refused, reset, timed out), `TransferError` (a body that fails its checksum).
"""

from __future__ import annotations

import http.client
import json
import secrets
import time
import urllib.parse
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, Final

from taprig.schema import API_VERSION, objects, records
from taprig.schema.http import JSON, MSGPACK, digest_matches

from .errors import ClientError

USER_AGENT: Final = "taprig-client"
TIMEOUT_S: Final = 30.0  # a single request; long-polls add their own wait
MAX_POINT_SET_BYTES: Final = 256 << 20  # largest point-set body accepted, bytes
RETRIES: Final = 3  # a request that meets a dropped kept-alive connection is sent again


class RigError(ClientError):
    """The rig answered with an error status."""

    def __init__(self, status: int, code: str, message: str) -> None:
        super().__init__(f"the rig answered {status} ({code}): {message}")
        self.status, self.code, self.message = status, code, message


class RigUnreachable(ClientError):
    """No answer from the rig (connection refused, reset or timed out)."""


class TransferError(ClientError):
    """A body that does not match its checksum, or is not what the schema says."""


@dataclass(frozen=True, slots=True)
class RigInfo:
    """What /v1/info says: the rig's name, stable id and versions."""

    name: str
    rig_id: str
    api_version: int
    schema_version: int
    daemon_version: str


@dataclass(frozen=True, slots=True)
class Body:
    """A verified response body: its bytes and the Content-Digest it was checked against."""

    data: bytes
    digest: str


def base_url(url: str) -> str:
    """``http://host:port`` of a rig address given as URL or host:port; ValueError if not."""
    text = url.strip()
    if "://" not in text:
        text = "http://" + text
    parts = urllib.parse.urlsplit(text)
    if parts.scheme != "http" or not parts.hostname:
        raise ValueError(f"{url!r} is not a rig address (http://host:port)")
    try:
        port = parts.port or 8470
    except ValueError:
        raise ValueError(f"{url!r} has no valid port") from None
    host = f"[{parts.hostname}]" if ":" in parts.hostname else parts.hostname
    return f"http://{host}:{port}"


class RigClient:
    """Blocking HTTP client of one rig. `token` may be None for the public endpoints.

    url: ``http://host:port`` (a path, query or fragment is ignored). timeout_s: per request.
    """

    def __init__(self, url: str, token: str | None, timeout_s: float = TIMEOUT_S) -> None:
        self.url = base_url(url)
        parts = urllib.parse.urlsplit(self.url)
        self._host, self._port = parts.hostname or "", parts.port or 8470
        self._token, self.timeout_s = token, timeout_s
        self._conn: http.client.HTTPConnection | None = None
        self.bytes_in = 0
        """Body bytes received so far (for throughput figures)."""

    # -- plumbing

    def clone(self) -> RigClient:
        """Another client of the same rig with its own connection (for another thread)."""
        return RigClient(self.url, self._token, self.timeout_s)

    def close(self) -> None:
        """Drop the kept-alive connection; idempotent, and the client may be used again."""
        if self._conn is not None:
            self._conn.close()
            self._conn = None

    def __enter__(self) -> RigClient:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def _connection(self, timeout_s: float) -> http.client.HTTPConnection:
        if self._conn is None:
            self._conn = http.client.HTTPConnection(self._host, self._port, timeout=timeout_s)
        self._conn.timeout = timeout_s
        if self._conn.sock is not None:
            self._conn.sock.settimeout(timeout_s)
        return self._conn

    def request(
        self,
        method: str,
        path: str,
        *,
        query: Mapping[str, Any] | None = None,
        body: Any = None,
        accept: str = JSON,
        wait_s: float = 0.0,
        max_bytes: int = 64 << 20,
    ) -> tuple[int, http.client.HTTPMessage, bytes]:
        """(status, headers, body) of one request; retried on a dropped kept-alive connection.

        body: a JSON-able object (sent as JSON). wait_s: how long the rig may hold the answer
        (long-polls), added to the timeout. Raises RigUnreachable when no answer comes.
        """
        target = path + ("?" + urllib.parse.urlencode(query) if query else "")
        headers = {"Accept": accept, "User-Agent": USER_AGENT}
        if self._token is not None:
            headers["Authorization"] = f"Bearer {self._token}"
        payload = None
        if body is not None:
            payload = json.dumps(body, separators=(",", ":")).encode()
            headers["Content-Type"] = JSON
        last: Exception | None = None
        for attempt in range(RETRIES):
            conn = self._connection(self.timeout_s + wait_s)
            try:
                conn.request(method, target, body=payload, headers=headers)
                resp = conn.getresponse()
                length = resp.getheader("Content-Length")
                if length is not None and int(length) > max_bytes:
                    self.close()
                    raise TransferError(f"{path}: {length} bytes is more than {max_bytes}")
                data = resp.read()
                self.bytes_in += len(data)
                if resp.will_close:
                    self.close()
                return resp.status, resp.headers, data
            except (OSError, http.client.HTTPException) as exc:  # refused, reset, timed out
                # A kept-alive connection the rig closed meanwhile fails on first use: a
                # fresh connection settles it. Every request here is a read, or a control
                # request with a request id the rig answers once, so sending again is safe.
                self.close()
                last = exc
                if attempt + 1 < RETRIES:
                    time.sleep(0.05 * (attempt + 1))
        raise RigUnreachable(f"no answer from {self.url}{path}: {last}") from last

    def _json(self, method: str, path: str, **kw: Any) -> Any:
        status, _headers, data = self.request(method, path, **kw)
        try:
            obj = json.loads(data) if data else {}
        except ValueError:
            obj = {}
        if status >= 400:
            code = obj.get("error", "error") if isinstance(obj, dict) else "error"
            message = obj.get("message", "") if isinstance(obj, dict) else ""
            raise RigError(status, str(code), str(message) or http.client.responses.get(status, ""))
        return obj

    # -- reading

    def info(self) -> RigInfo:
        """The rig's name, id and versions (no token needed); RigError on an API mismatch."""
        obj = self._json("GET", "/v1/info")
        try:
            info = RigInfo(str(obj["rig"]), str(obj.get("rig_id", "")), int(obj["api_version"]),
                           int(obj["schema_version"]), str(obj["daemon_version"]))  # fmt: skip
        except (KeyError, TypeError, ValueError):
            raise TransferError(f"{self.url}/v1/info is not a rig's answer: {obj!r:.200}") from None
        if info.api_version != API_VERSION or info.schema_version != records.SCHEMA_VERSION:
            raise RigError(
                400, "version",
                f"the rig speaks API {info.api_version}, schema {info.schema_version}; this "
                f"client speaks API {API_VERSION}, schema {records.SCHEMA_VERSION}",
            )  # fmt: skip
        return info

    def state(self) -> dict[str, Any]:
        obj: dict[str, Any] = self._json("GET", "/v1/state")
        return obj

    def tests(self) -> list[records.WireTest]:
        obj = self._json("GET", "/v1/tests")
        return [objects.test_from_obj(t) for t in obj["tests"]]

    def test(self, name: str) -> records.WireTest:
        return objects.test_from_obj(self._json("GET", f"/v1/tests/{urllib.parse.quote(name)}"))

    def points(self, test: str | None = None, since: int = 0) -> list[records.WirePointSetSummary]:
        query: dict[str, Any] = {"since": since}
        if test is not None:
            query["test"] = test
        obj = self._json("GET", "/v1/points", query=query)
        return [objects.point_set_summary_from_json(p) for p in obj["points"]]

    def changes(
        self, since: int, wait_s: float = 0.0
    ) -> tuple[list[records.WireChange], int, bool]:
        """(changes after `since`, last seq, more waiting) — the rig holds the answer up to
        wait_s seconds when there is nothing new."""
        query: dict[str, Any] = {"since": since}
        if wait_s > 0:
            query["wait"] = f"{wait_s:.3f}"
        obj = self._json("GET", "/v1/changes", query=query, wait_s=wait_s)
        changes = [objects.change_from_obj(c) for c in obj["changes"]]
        return changes, int(obj["last_seq"]), bool(obj["more"])

    def point_set_body(self, point_set_id: int, with_hits: bool = False) -> Body:
        """The msgpack body of a point set, verified by its Content-Digest.

        with_hits: with every hit's raw record (``?hits=1``); without, the hits are listed
        without records, the body the rig stored at commit. Raises TransferError when the
        checksum does not match or is missing.
        """
        return verified(point_set_id, *self.point_set_raw(point_set_id, with_hits))

    def point_set_raw(self, point_set_id: int, with_hits: bool = False) -> tuple[bytes, str | None]:
        """(body, Content-Digest) of a point set as received, not yet verified (`verified`
        does that; `point_set_body` both). RigError for an error answer."""
        path = f"/v1/points/{point_set_id}" + ("?hits=1" if with_hits else "")
        status, headers, data = self.request(
            "GET", path, accept=MSGPACK, max_bytes=MAX_POINT_SET_BYTES
        )
        if status >= 400:
            self._raise(status, data)
        return data, headers.get("Content-Digest")

    def _raise(self, status: int, data: bytes) -> None:
        try:
            obj = json.loads(data)
        except ValueError:
            obj = {}
        raise RigError(status, str(obj.get("error", "error")), str(obj.get("message", "")))

    # -- control

    def act(self, action: str, request_id: str | None = None, **fields: Any) -> dict[str, Any]:
        """POST /v1/session/<action>; a retry with the same request id acts once."""
        body = {"request_id": request_id or new_request_id(), **fields}
        obj: dict[str, Any] = self._json("POST", f"/v1/session/{action}", body=body)
        return obj

    def create_test(self, name: str, grid: list[dict[str, Any]], **fields: Any) -> records.WireTest:
        body = {"request_id": new_request_id(), "name": name, "grid": grid, **fields}
        return objects.test_from_obj(self._json("POST", "/v1/tests", body=body))

    def last_hit(self) -> dict[str, Any]:
        obj: dict[str, Any] = self._json("GET", "/v1/hits/last")
        return obj


def verified(point_set_id: int, data: bytes, digest: str | None) -> Body:
    """`data` as a Body when `digest` (a Content-Digest value) carries its SHA-256;
    TransferError when it does not or is missing."""
    if not digest_matches(digest, data):
        raise TransferError(
            f"point set {point_set_id}: {len(data)} bytes do not match the rig's checksum "
            f"({digest or 'none sent'})"
        )
    return Body(data, str(digest))


def new_request_id() -> str:
    """A fresh request id for a control request (22 URL-safe characters)."""
    return secrets.token_urlsafe(16)
