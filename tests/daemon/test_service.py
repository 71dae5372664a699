"""The HTTP service end to end: a real server on 127.0.0.1 (ephemeral port), a real rig on the
simulated test piece, real HTTP requests with aiohttp.ClientSession; one asyncio.run per test.

Arrays fetched over HTTP are compared bit for bit with the store's (numpy `tobytes`), and each
body with its `Content-Digest` header, recomputed here with hashlib's SHA-256 (FIPS 180-4;
header syntax RFC 9530 §2). Nothing leaves 127.0.0.1; every wait has a deadline.
"""

from __future__ import annotations

import asyncio
import base64
import contextlib
import hashlib
import json
import logging
import re
import time
from collections.abc import AsyncIterator, Awaitable, Callable, Iterator
from pathlib import Path
from typing import Any

import aiohttp
import numpy as np
import pytest

from taprig.daemon import __version__
from taprig.daemon.api.bodies import BodyCache
from taprig.daemon.api.openapi import openapi, openapi_text
from taprig.daemon.api.routes import ROUTES, Route
from taprig.daemon.api.service import Service
from taprig.daemon.auth import Auth
from taprig.daemon.config import load_config
from taprig.daemon.lifespan import RunningRig, start_rig
from taprig.schema import API_VERSION, codec, http, objects, records

from .test_rig import DAMPED, grid_of, operator_pause, wait_info

OPENAPI_FILE = Path(__file__).resolve().parents[2] / "daemon" / "openapi.json"
LIMIT_S = 30.0  # the longest any one test may wait for anything
Json = dict[str, Any]


@pytest.fixture
def running(tmp_path: Path) -> Iterator[RunningRig]:
    cfg = load_config(None, [f"store.data_dir={tmp_path / 'data'}", "capture.block=8192",
                             "capture.averages=3", "store.min_free_mb=1"])  # fmt: skip
    r = start_rig(cfg, model=DAMPED)
    try:
        wait_info(r)
        yield r
    finally:
        r.close()


@pytest.fixture
def auth(tmp_path: Path) -> Auth:
    """The rig's token checker; the failure limit raised so that only its own test meets it."""
    return Auth(tmp_path / "auth", max_failures=10_000)


class Api:
    """An HTTP client of one service with the rig's token."""

    def __init__(self, http: aiohttp.ClientSession, token: str) -> None:
        self.http, self.token = http, token
        self._ids = 0

    def headers(self, **extra: str) -> dict[str, str]:
        return {"Authorization": f"Bearer {self.token}", **extra}

    def request_id(self) -> str:
        self._ids += 1
        return f"test-request-{self._ids:04d}"

    async def get(self, path: str, **kw: Any) -> tuple[int, Any]:
        async with self.http.get(path, headers=self.headers(), **kw) as resp:
            return resp.status, await resp.json()

    async def post(self, path: str, body: Json) -> tuple[int, Any]:
        async with self.http.post(path, json=body, headers=self.headers()) as resp:
            return resp.status, await resp.json()

    async def act(self, action: str, **fields: Any) -> Json:
        """A session action that must succeed; a fresh request_id unless one is given."""
        fields.setdefault("request_id", self.request_id())
        status, body = await self.post(f"/v1/session/{action}", fields)
        assert status == 200, body
        return body  # type: ignore[no-any-return]

    async def raw(self, method: str, path: str, **kw: Any) -> aiohttp.ClientResponse:
        headers = {**self.headers(), **kw.pop("headers", {})}
        async with self.http.request(method, path, headers=headers, **kw) as resp:
            await resp.read()
            return resp


@contextlib.asynccontextmanager
async def serving(running: RunningRig, auth: Auth, **kw: Any) -> AsyncIterator[tuple[Service, Api]]:
    service = Service(running, auth, **kw)
    await service.async_start()
    try:
        timeout = aiohttp.ClientTimeout(total=LIMIT_S)
        base = f"http://127.0.0.1:{service.port}"
        async with aiohttp.ClientSession(base_url=base, timeout=timeout) as http:
            yield service, Api(http, auth.token)
    finally:
        await service.async_close()


def run(coro: Awaitable[None]) -> None:
    async def bounded() -> None:
        async with asyncio.timeout(LIMIT_S * 3):
            await coro

    asyncio.run(bounded())


class EventStream:
    """A reader of /v1/events that parses the stream into (kind, data) in a queue."""

    def __init__(self, api: Api) -> None:
        self.api = api
        self.events: asyncio.Queue[tuple[str, Any]] = asyncio.Queue()
        self.comments: asyncio.Queue[str] = asyncio.Queue()
        self._task: asyncio.Task[None] | None = None
        self.connected = asyncio.Event()

    async def __aenter__(self) -> EventStream:
        self._task = asyncio.create_task(self._read())
        waiter = asyncio.ensure_future(self.connected.wait())
        done, _ = await asyncio.wait(
            {self._task, waiter}, timeout=LIMIT_S, return_when=asyncio.FIRST_COMPLETED
        )
        waiter.cancel()
        if self._task in done:
            self._task.result()  # the reason it could not connect
        assert self.connected.is_set(), "the event stream did not open"
        return self

    async def ended(self) -> None:
        """Return once the server has ended the stream (fail after LIMIT_S)."""
        assert self._task is not None
        async with asyncio.timeout(LIMIT_S):
            await asyncio.shield(self._task)

    async def __aexit__(self, *exc: object) -> None:
        assert self._task is not None
        self._task.cancel()
        with contextlib.suppress(asyncio.CancelledError):
            await self._task

    async def _read(self) -> None:
        headers = self.api.headers(Accept=http.JSON)
        timeout = aiohttp.ClientTimeout(total=None, sock_read=LIMIT_S)
        async with self.api.http.get("/v1/events", headers=headers, timeout=timeout) as resp:
            assert resp.status == 200
            assert resp.content_type == "text/event-stream"
            self.connected.set()
            kind, data = "message", ""
            async for raw in resp.content:
                line = raw.decode().rstrip("\n")
                if line.startswith(":"):
                    self.comments.put_nowait(line)
                elif line.startswith("event: "):
                    kind = line[7:]
                elif line.startswith("data: "):
                    data = line[6:]
                elif not line and data:
                    self.events.put_nowait((kind, json.loads(data)))
                    kind, data = "message", ""

    async def next(self, kind: str) -> Any:
        async with asyncio.timeout(LIMIT_S):
            while True:
                got, data = await self.events.get()
                if got == kind:
                    return data


def labels_grid(running: RunningRig, labels: list[str]) -> list[Json]:
    assert running.instrument is not None
    return [{"label": p.label, "x": p.x, "y": p.y, "z": p.z, "direction": p.direction}
            for p in grid_of(running.instrument, labels)]  # fmt: skip


async def tap(running: RunningRig, stream: EventStream, point: str) -> Any:
    """The operator's pause (on the device's sample clock), then one clean tap at `point`;
    the hit event it caused."""
    assert running.instrument is not None
    await asyncio.to_thread(operator_pause, running)
    assert await asyncio.to_thread(running.instrument.tap, point, 25.0) is not None
    return await stream.next("hit")


async def until(condition: Callable[[], bool]) -> None:
    """Return once `condition()` holds; fail after LIMIT_S."""
    async with asyncio.timeout(LIMIT_S):
        while not condition():
            await asyncio.sleep(0.005)


def store_state(running: RunningRig) -> tuple[int, list[str], dict[str, Any]]:
    """What a refused request must leave as it was: the store and the session (not the link
    counters, which move with every frame, nor the disk's free space, which other programs
    move)."""
    session = {k: v for k, v in running.rig.snapshot().items() if k != "link"}
    session["disk"] = {k: v for k, v in session["disk"].items() if k != "free_mb"}
    return running.store.last_seq(), [t.name for t in running.store.list_tests()], session


def example_path(route: Route) -> str:
    return route.path.replace("{name}", "panel").replace("{id}", "1")


# ---------------------------------------------------------------- public and protected


def test_public_endpoints_need_no_token(running: RunningRig, auth: Auth) -> None:
    async def main() -> None:
        async with serving(running, auth, rig_name="bench-rig") as (_, api):
            async with api.http.get("/v1/info") as resp:
                assert resp.status == 200
                info = await resp.json()
            rig_id = (running.config.store.data_dir / "rig-id").read_text().strip()
            assert info == {"rig": "bench-rig", "rig_id": rig_id, "api_version": API_VERSION,
                            "schema_version": records.SCHEMA_VERSION,
                            "daemon_version": __version__}  # fmt: skip
            async with api.http.get("/v1/health") as resp:
                assert resp.status == 200
                health = await resp.json()
            assert health["status"] == "ok" and health["store"] is True
            async with api.http.get("/v1/openapi.json") as resp:
                assert resp.status == 200
                assert await resp.json() == openapi()

    run(main())


def test_every_other_endpoint_needs_the_token(running: RunningRig, auth: Auth) -> None:
    protected = [r for r in ROUTES if not r.public]
    assert {r.op for r in protected} >= {"getState", "streamEvents", "sessionNext", "createTest"}
    before = store_state(running)

    async def main() -> None:
        async with serving(running, auth) as (_, api):
            for route in protected:
                for headers in ({}, {"Authorization": "Bearer not-the-token"},
                                {"Authorization": f"Basic {api.token}"}):  # fmt: skip
                    async with api.http.request(route.method, example_path(route),
                                                headers=headers, json={}) as resp:  # fmt: skip
                        assert resp.status == 401, (route.path, headers)
                        assert resp.headers["WWW-Authenticate"] == "Bearer"
                        body = await resp.json()
                        assert body["error"] == "unauthorized"
                        assert "pair again with `taprigd pair`" in body["message"]
            status, _ = await api.get("/v1/state")
            assert status == 200

    run(main())
    assert store_state(running) == before


# ---------------------------------------------------------------- capture over HTTP


def arrays_from_json(obj: Json) -> dict[str, np.ndarray]:
    """The arrays of a JSON point set, rebuilt with the dtype and shape it names."""
    out = {}
    for key, value in obj.items():
        if isinstance(value, dict) and "dtype" in value:
            dtype = np.dtype(value["dtype"])
            if dtype.kind == "c":
                arr = np.empty(value["shape"], dtype)
                arr.real, arr.imag = value["real"], value["imag"]  # no arithmetic: exact
            else:
                arr = np.array(value["values"], dtype=dtype).reshape(value["shape"])
            out[key] = arr
    return out


def assert_digest(resp: aiohttp.ClientResponse, body: bytes) -> None:
    sha = base64.b64encode(hashlib.sha256(body).digest()).decode()
    assert resp.headers["Content-Digest"] == f"sha-256=:{sha}:"


ARRAYS = ("freq_hz", "h1", "h2", "coherence", "gff", "gxx", "gfx")


def test_capture_over_http(running: RunningRig, auth: Auth) -> None:
    """Create, select, arm, tap; the event stream, the changes feed and both encodings.

    Bit-for-bit equality with the store: numpy `tobytes` of both sides.
    """
    labels = ["A1", "B3"]

    async def main() -> None:
        async with serving(running, auth) as (_, api), EventStream(api) as stream:
            status, test = await api.post("/v1/tests", {
                "name": "panel-http", "grid": labels_grid(running, labels), "averages": 2,
                "reference": "B3", "sensor_points": running.instrument.model.sensor_places(),
                "request_id": api.request_id(),
            })  # fmt: skip
            assert status == 201, test
            assert [row[0] for row in test["grid"]] == labels and test["averages"] == 2
            assert (await api.act("select", test="panel-http"))["state"]["point"] == "A1"
            assert (await api.act("arm"))["state"]["armed"] is True
            status, none_yet = await api.get("/v1/hits/last")
            assert status == 404 and none_yet["error"] == "no_hit"
            _, start = await api.get("/v1/changes", params={"since": 0})
            seq0 = start["last_seq"]
            poll = asyncio.create_task(api.get("/v1/changes", params={"since": seq0, "wait": 25}))
            t0 = time.monotonic()
            first = await tap(running, stream, "A1")
            assert first["accepted"] and first["counted"] and first["averages"] == 1
            assert not poll.done(), "the long-poll returned before anything changed"
            status, last = await api.get("/v1/hits/last")
            assert status == 200 and last["point"] == "A1" and last["accepted"]
            force = last["traces"]["hammer"]
            assert len(force["max"]) == 256 and max(force["max"]) > 20.0  # N, a 25 N tap
            # one average: γ² = 1 at every line (Bendat and Piersol, Random Data, 2010)
            coh = np.asarray(last["spectra"]["coherence"])
            assert coh.shape[0] == 2 and 50 < coh.shape[1] <= 512
            assert np.allclose(coh, 1.0, atol=1e-9)
            # Cut to the force band the tap excited (daemon/display.py).
            low, top = last["band_hz"]
            freq = last["spectra"]["freq_hz"]
            assert low <= freq[0] and freq[-1] <= top < last["rate_hz"] / 2
            assert len(freq) == len(last["spectra"]["h1_abs"][0]) == coh.shape[1]
            await tap(running, stream, "A1")
            done = await stream.next("completed")
            assert done["point"] == "A1" and done["version"] == 1
            status, changes = await poll
            assert status == 200 and time.monotonic() - t0 < 20
            (change,) = changes["changes"]
            assert change["kind"] == "point_set" and change["seq"] == done["seq"]
            pid = change["point_set_id"]
            stored = await asyncio.to_thread(running.store.get_point_set, pid, True)

            async with api.http.get(f"/v1/points/{pid}", headers=api.headers()) as resp:
                assert resp.content_type == http.JSON
                body = await resp.read()
                assert_digest(resp, body)
            as_json = json.loads(body)
            assert as_json["point"] == "A1" and as_json["n_averages"] == 2
            assert all(h["data"] is None for h in as_json["hits"])
            for name, arr in arrays_from_json(as_json).items():
                ref = getattr(stored, name)
                assert arr.dtype == ref.dtype and arr.tobytes() == ref.tobytes(), name

            headers = api.headers(Accept=http.MSGPACK)
            async with api.http.get(f"/v1/points/{pid}?hits=1", headers=headers) as resp:
                assert resp.content_type == http.MSGPACK
                body = await resp.read()
                assert_digest(resp, body)
            got = objects.point_set_from_obj(codec.unpack(body, max_bytes=1 << 26))
            assert got.id == pid and got.seq == done["seq"]
            for name in ARRAYS:
                a, ref = getattr(got, name), getattr(stored, name)
                assert a.dtype == ref.dtype and a.tobytes() == ref.tobytes(), name
            assert len(got.hits) == len(stored.hits) == 2
            for h, ref_hit in zip(got.hits, stored.hits, strict=True):
                assert h.data is not None and ref_hit.data is not None
                assert h.data.tobytes() == ref_hit.data.tobytes()

            status, listing = await api.get("/v1/points", params={"test": "panel-http"})
            assert [(p["id"], p["point"]) for p in listing["points"]] == [(pid, "A1")]
            status, state = await api.get("/v1/state")
            assert state["session"]["point"] == "B3" and state["session"]["done"] == ["A1"]
            assert state["device"]["id"] == "SIMULATED-PANEL" and state["last_seq"] == done["seq"]
            assert state["session"]["link"]["crc_errors"] == 0

    run(main())


def test_control_is_idempotent_by_request_id(running: RunningRig, auth: Auth) -> None:
    labels = ["A1", "B3", "C4"]
    running.rig.create_test("steps", grid_of(running.instrument, labels))  # type: ignore[arg-type]

    async def main() -> None:
        async with serving(running, auth) as (_, api):
            await api.act("select", test="steps")
            rid = api.request_id()
            first = await api.act("next", request_id=rid)
            again = await api.act("next", request_id=rid)
            assert first == again and first["state"]["point"] == "B3"
            assert (await asyncio.to_thread(running.rig.snapshot))["point"] == "B3"
            # Two copies of one request at once still act once.
            rid = api.request_id()
            both = await asyncio.gather(*(api.post("/v1/session/previous", {"request_id": rid})
                                          for _ in range(2)))  # fmt: skip
            assert both[0] == both[1] and both[0][1]["state"]["point"] == "A1"
            # The same id for another request is refused and does nothing.
            status, body = await api.post("/v1/session/next", {"request_id": rid})
            assert status == 422 and body["error"] == "request_id_reused"
            # An error is an outcome too: the retry gets the same 409, the rig is asked once.
            rid = api.request_id()
            for _ in range(2):
                status, body = await api.post("/v1/session/accept", {"request_id": rid})
                assert status == 409 and body["error"] == "session"
            for bad in ({}, {"request_id": "short"}, {"request_id": "has space in it"},
                        {"request_id": "x" * 65}, {"request_id": 12345678}):  # fmt: skip
                status, body = await api.post("/v1/session/next", bad)
                assert status == 400, bad
            status, _ = await api.post(
                "/v1/session/goto", {"request_id": api.request_id(), "point": "Z9"}
            )
            assert status == 404
            assert (await asyncio.to_thread(running.rig.snapshot))["point"] == "A1"
            assert (await api.act("goto", point="C4"))["state"]["point"] == "C4"

    run(main())


MAX_BODY = 4096


def bad_requests() -> list[tuple[str, str, dict[str, Any], int]]:
    """(method, path, request options, expected status): one of each class of bad input."""
    ok_grid = [{"label": "A1", "x": 0.0, "y": 0.0, "z": 0.0}]
    rid = "bad-input-0001"

    def body(text: str | bytes, media: str = "application/json") -> dict[str, Any]:
        return {"data": text, "headers": {"Content-Type": media}}

    return [
        ("POST", "/v1/tests", body(b"{"), 400),
        ("POST", "/v1/tests", body(b"\xff\xfe\x00"), 400),
        ("POST", "/v1/tests", body("[]"), 400),
        ("POST", "/v1/tests", body('{"name": "a", "name": "b", "grid_csv": ""}'), 400),
        (
            "POST",
            "/v1/tests",
            body('{"name": "n", "grid": [{"label": "A", "x": NaN, "y": 0, "z": 0}]}'),
            400,
        ),
        ("POST", "/v1/tests", body("[" * 5000 + "]" * 5000), 413),
        ("POST", "/v1/tests", body("[" * 2000 + "]" * 2000), 400),
        ("POST", "/v1/tests", {"json": {"name": "n", "grid": ok_grid, "colour": 1}}, 400),
        ("POST", "/v1/tests", {"json": {"name": "n"}}, 400),
        ("POST", "/v1/tests", {"json": {"name": "n", "grid": ok_grid, "grid_csv": "x"}}, 400),
        ("POST", "/v1/tests", {"json": {"name": "../etc", "grid": ok_grid}}, 400),
        ("POST", "/v1/tests", {"json": {"name": "..", "grid": ok_grid}}, 400),
        ("POST", "/v1/tests", {"json": {"name": "n", "grid": [*ok_grid, *ok_grid]}}, 400),
        ("POST", "/v1/tests", {"json": {"name": "n", "grid": ok_grid, "reference": "B7"}}, 400),
        ("POST", "/v1/tests", {"json": {"name": "n", "grid": ok_grid, "averages": 0}}, 400),
        ("POST", "/v1/tests", {"json": {"name": "n", "grid": ok_grid, "averages": True}}, 400),
        (
            "POST",
            "/v1/tests",
            {"json": {"name": "n", "grid": ok_grid, "sensor_points": {"acc9": "A1"}}},
            400,
        ),
        ("POST", "/v1/tests", {"json": {"name": "n", "grid_csv": "label,x\nA,1\n"}}, 400),
        (
            "POST",
            "/v1/tests",
            {"json": {"name": "n", "grid_csv": "label,x,y,z\nA,1,2,3e9\n"}},
            400,
        ),
        ("POST", "/v1/tests", {"json": {"name": "panel", "grid": ok_grid}}, 409),
        ("POST", "/v1/tests", body('{"name": "n", "grid_csv": "' + "x" * MAX_BODY + '"}'), 413),
        ("POST", "/v1/tests", body(codec.pack({"name": "n", "grid": ok_grid}), http.MSGPACK), 415),
        ("POST", "/v1/tests", body('{"name": "n", "grid": []}', "text/plain"), 415),
        ("GET", "/v1/tests/nosuch", {}, 404),
        ("GET", "/v1/points/999999", {}, 404),
        ("GET", "/v1/points/abc", {}, 400),
        ("GET", "/v1/points/-1", {}, 400),
        ("GET", "/v1/points/1?hits=2", {}, 400),
        ("GET", "/v1/points?test=nosuch", {}, 404),
        ("GET", "/v1/points?since=-1", {}, 400),
        ("GET", "/v1/points?since=1&since=2", {}, 400),
        ("GET", "/v1/points?colour=red", {}, 400),
        ("GET", "/v1/changes?wait=31", {}, 400),
        ("GET", "/v1/changes?wait=nan", {}, 400),
        ("GET", "/v1/nothing-here", {}, 404),
        ("DELETE", "/v1/tests", {}, 405),
        ("PUT", "/v1/session/next", {"json": {"request_id": rid}}, 405),
        ("GET", "/v1/session/arm", {}, 405),
        ("POST", "/v1/info", {}, 405),
        ("POST", "/v1/session/explode", {"json": {"request_id": rid}}, 404),
        ("POST", "/v1/session/select", {"json": {"request_id": rid, "test": "nosuch"}}, 404),
        ("POST", "/v1/session/select", {"json": {"request_id": rid, "test": "a/b"}}, 400),
        ("POST", "/v1/session/arm", {"json": {"request_id": rid, "extra": 1}}, 400),
        ("POST", "/v1/session/arm", {}, 400),
        ("POST", "/v1/session/arm", {"json": None}, 400),
    ]


TRAVERSALS = (
    "/v1/tests/..%2F..%2Fetc%2Fpasswd",
    "/v1/tests/%2E%2E%2F%2E%2E%2Fetc",
    "/v1/tests/%2E%2E",
    "/v1/tests/../../../etc/passwd",
    "/v1/points/..%2F1",
    "/v1/tests/%00",
    "/v1/tests/a%5Cb",
)


async def raw_get(port: int, target: str, token: str) -> tuple[int, bytes]:
    """GET `target` byte for byte as written (no client-side normalising); (status, body)."""
    reader, writer = await asyncio.open_connection("127.0.0.1", port)
    try:
        writer.write(f"GET {target} HTTP/1.1\r\nHost: 127.0.0.1\r\nAuthorization: Bearer "
                     f"{token}\r\nConnection: close\r\n\r\n".encode())  # fmt: skip
        await writer.drain()
        async with asyncio.timeout(LIMIT_S):
            answer = await reader.read()
    finally:
        writer.close()
        await writer.wait_closed()
    head, _, body = answer.partition(b"\r\n\r\n")
    return int(head.split()[1]), body


def test_bad_input_is_refused_and_changes_nothing(running: RunningRig, auth: Auth) -> None:
    running.rig.create_test("panel", grid_of(running.instrument, ["A1"]))  # type: ignore[arg-type]
    before = store_state(running)

    async def main() -> None:
        async with serving(running, auth, max_body=MAX_BODY) as (service, api):
            for method, path, options, want in bad_requests():
                resp = await api.raw(method, path, **options)
                assert resp.status == want, (method, path, resp.status)
                assert resp.content_type == "application/json", (method, path)
                if want == 405:
                    assert "Allow" in resp.headers
            for target in TRAVERSALS:
                status, body = await raw_get(service.port, target, api.token)
                assert status in (400, 404), (target, status)
                assert json.loads(body)["error"] in ("invalid", "not_found"), target

    run(main())
    assert store_state(running) == before


def test_rate_limit_answers_429(running: RunningRig, tmp_path: Path) -> None:
    """After Auth's failure limit from one peer, a wrong token gets 429 + Retry-After; the
    right one still gets in (users behind one NAT address share the peer address)."""
    auth = Auth(tmp_path / "strict", max_failures=3, lockout_s=60.0)

    async def main() -> None:
        async with serving(running, auth) as (_, api):
            wrong = {"Authorization": "Bearer " + "x" * 43}
            statuses = []
            for _ in range(4):
                async with api.http.get("/v1/state", headers=wrong) as resp:
                    statuses.append(resp.status)
            assert statuses == [401, 401, 401, 429]
            async with api.http.get("/v1/state", headers=wrong) as resp:
                assert resp.status == 429
                assert 1 <= int(resp.headers["Retry-After"]) <= 60
                assert (await resp.json())["error"] == "rate_limited"
            async with api.http.get("/v1/state", headers=api.headers()) as resp:
                assert resp.status == 200
            async with api.http.get("/v1/info") as resp:  # public routes stay open
                assert resp.status == 200

    run(main())


# ---------------------------------------------------------------- many readers


def test_eight_concurrent_readers_see_every_point_set(running: RunningRig, auth: Auth) -> None:
    """Eight clients long-poll the changes feed and pull each new point set while the rig
    captures three points; all see the same point sets, byte for byte, none missed."""
    labels = ["A1", "B3", "C4"]

    async def reader(api: Api, since: int) -> dict[int, str]:
        seen: dict[int, str] = {}
        while len(seen) < len(labels):
            status, feed = await api.get("/v1/changes", params={"since": since, "wait": 10})
            assert status == 200
            for change in feed["changes"]:
                if change["kind"] == "point_set":
                    pid = change["point_set_id"]
                    headers = api.headers(Accept=http.MSGPACK)
                    async with api.http.get(f"/v1/points/{pid}", headers=headers) as resp:
                        assert resp.status == 200
                        seen[pid] = hashlib.sha256(await resp.read()).hexdigest()
            since = feed["last_seq"]
        return seen

    async def operator(api: Api, stream: EventStream) -> None:
        for label in labels:
            for _ in range(2):
                await tap(running, stream, label)
            assert (await stream.next("completed"))["point"] == label

    async def main() -> None:
        async with serving(running, auth) as (_, api), EventStream(api) as stream:
            status, _ = await api.post(
                "/v1/tests", {"name": "busy", "averages": 2, "grid": labels_grid(running, labels)}
            )
            assert status == 201
            await api.act("select", test="busy")
            await api.act("arm")
            since = (await api.get("/v1/changes"))[1]["last_seq"]
            pulling = asyncio.gather(*(reader(api, since) for _ in range(8)))
            views, _ = await asyncio.gather(pulling, operator(api, stream))
        assert all(v == views[0] for v in views)
        stored = running.store.list_point_sets(test="busy")
        assert sorted(views[0]) == [s.id for s in stored]

    run(main())


# ---------------------------------------------------------------- the document, streams, logs


def test_openapi_document_is_committed_and_matches_the_routes() -> None:
    """daemon/openapi.json is `openapi_text()`; regenerate it with
    ``python -m taprig.daemon.api --openapi > daemon/openapi.json``."""
    assert OPENAPI_FILE.read_text() == openapi_text(), (
        "daemon/openapi.json is stale: run python -m taprig.daemon.api --openapi "
        "> daemon/openapi.json"
    )
    doc = json.loads(OPENAPI_FILE.read_text())
    assert doc["openapi"] == "3.1.0"
    ops = {(m.upper(), path) for path, item in doc["paths"].items() for m in item}
    assert ops == {(r.method, r.path) for r in ROUTES}
    for r in ROUTES:
        op = doc["paths"][r.path][r.method.lower()]
        in_path = {p["name"] for p in op.get("parameters", []) if p["in"] == "path"}
        assert in_path == set(re.findall(r"{(\w+)}", r.path)), r.path
        assert (op.get("security") == []) == r.public


def test_heartbeat_and_close_end_streams_and_polls(running: RunningRig, auth: Auth) -> None:
    async def main() -> None:
        service = Service(running, auth, heartbeat_s=0.1)
        await service.async_start()
        await service.async_start()  # a second start does nothing
        base = f"http://127.0.0.1:{service.port}"
        async with aiohttp.ClientSession(base_url=base) as http:
            api = Api(http, auth.token)
            async with EventStream(api) as stream:
                async with asyncio.timeout(LIMIT_S):
                    assert await stream.comments.get() == ": heartbeat"
                poll = asyncio.create_task(api.get("/v1/changes", params={"wait": 30}))
                await until(lambda: service.polls_waiting == 1)
                t0 = time.monotonic()
                await service.async_close()
                await service.async_close()  # idempotent
                assert (await poll)[0] == 200
                await stream.ended()  # by itself, not cancelled by the client
                assert time.monotonic() - t0 < 10

    run(main())


def test_access_log_never_holds_the_token(
    running: RunningRig, auth: Auth, caplog: pytest.LogCaptureFixture
) -> None:
    caplog.set_level(logging.DEBUG)

    async def main() -> None:
        async with serving(running, auth) as (_, api):
            assert (await api.get("/v1/state"))[0] == 200
            async with api.http.get(f"/v1/state?token={api.token}", headers=api.headers()) as r:
                assert r.status == 400
            async with api.http.get("/v1/state", headers={"Authorization": "Bearer zz"}) as r:
                assert r.status == 401

    run(main())
    access = [r for r in caplog.records if r.name == "aiohttp.access"]
    assert len(access) >= 3 and any("/v1/state" in r.getMessage() for r in access)
    assert auth.token not in caplog.text and "Bearer" not in caplog.text


def test_body_cache_keeps_the_most_recent_within_its_budget() -> None:
    cache = BodyCache(max_bytes=10)
    for pid, size in ((1, 4), (2, 4), (3, 4)):
        cache.put((pid, False, True), (b"x" * size, http.MSGPACK, "d"))
    assert cache.get((1, False, True)) is None and cache.bytes == 8
    assert cache.get((2, False, True)) is not None  # now the most recent
    cache.put((4, False, True), (b"y" * 4, http.MSGPACK, "d"))
    assert cache.get((3, False, True)) is None and cache.get((2, False, True)) is not None
    cache.put((5, False, True), (b"z" * 11, http.MSGPACK, "d"))  # larger than the budget
    assert cache.get((5, False, True)) is None and cache.bytes == 8
