"""The rig's HTTP service under /v1: aiohttp on the daemon's asyncio event loop.

Requests flow: the route table (routes.py) → token check (daemon/auth.py) → validation
(validate.py) → a handler here → a response body (bodies.py); any exception on the way
becomes a status in errors.py. Rig events reach clients through feed.py; control requests
act once per request id (once.py). The phone page (daemon/page.py) is added beside the
table, outside /v1: static files that need no token.

Threads: handlers run on the event loop and never block it; every rig and store call goes
through `asyncio.to_thread`. Rig state is read from the rig's published view
(`Rig.view()`), never from its fields.
"""

from __future__ import annotations

import asyncio
import functools
import logging
import math
from collections.abc import Awaitable, Callable, Sequence
from typing import TYPE_CHECKING, Any, Final

from aiohttp import web

from taprig.schema import API_VERSION, http, objects, records

from .. import __version__, identity, page, placement
from ..errors import TaprigError
from ..records import ChannelSpec, GridPoint, RovingMode
from . import validate
from .bodies import (
    BODY_CACHE_BYTES,
    BodyCache,
    Encoded,
    device_json,
    encode_point_set,
    json_response,
    outcome_json,
    reply,
    reply_built,
    stored_body,
    test_obj,
)
from .errors import ApiError, Outcome, error_of, invalid
from .feed import Feed
from .gate import Gate, Limits
from .once import Once
from .openapi import openapi_text
from .routes import HEARTBEAT_S, JSON, PREFIX, ROUTES, Call, Payload, Route
from .site import GatedSite, fit_to_open_files

if TYPE_CHECKING:
    from ..auth import Auth, AuthResult
    from ..capture.session import Plan
    from ..running import RunningRig

log = logging.getLogger(__name__)

CHANGES_LIMIT: Final = 1000  # entries per /v1/changes answer
SHUTDOWN_S: Final = 2.0  # how long close waits for requests in flight
KEEPALIVE_S: Final = 75.0  # an idle kept-alive connection is closed after this, seconds
# The access log names the peer, the request line, the status, the size and the time;
# never a header, so the Authorization header (the token) cannot reach a log.
ACCESS_LOG_FORMAT: Final = '%a "%r" %s %b %Tfs'
# And, should a token be written anyway (a client putting it in a URL), these loggers redact it.
REDACTED_LOGGERS: Final = (
    "aiohttp.access", "aiohttp.server", "aiohttp.web", __name__, "taprig.daemon.api.errors",
    "taprig.daemon.api.feed",
)  # fmt: skip


def _unplaced(plan: Plan | None, responses: Sequence[ChannelSpec]) -> list[str]:
    """The selected roving-hammer test's response channels whose place it never got (for
    the page's prompt)."""
    if plan is None or plan.roving_mode is not RovingMode.HAMMER:
        return []
    return [c.label for c in responses if not plan.sensor_points.get(c.label)]


class Service:
    """The HTTP service of one running rig. `await async_start()`, then `.port` is bound.

    host, port: where to listen (port 0: any free port). max_body: largest request body in
    bytes (413 beyond). rig_name: reported by /v1/info (default: the configured rig name).
    rig_id: the rig's stable id, reported by /v1/info (default: daemon/identity.py's, kept in
    the state folder).
    heartbeat_s: comment interval on idle event streams. body_cache_bytes: encoded point sets
    kept for the next reader (0: none). limits: the connection cap, the share per client
    address and the header deadline (daemon/api/gate.py). body_timeout_s: time a request
    has to send its body (408 beyond).
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
        limits: Limits | None = None,
        body_timeout_s: float = 30.0,
    ) -> None:
        self.running, self.auth = running, auth
        self.store, self.rig = running.store, running.rig
        self.host, self.port, self.max_body = host, port, max_body
        self.body_timeout_s = body_timeout_s
        self.rig_name = rig_name if rig_name is not None else running.config.rig.name
        data_dir = running.config.store.data_dir
        self.rig_id = rig_id if rig_id is not None else identity.rig_id(data_dir)
        self._runner: web.AppRunner | None = None
        self._feed = Feed(heartbeat_s)
        self._once = Once()
        self._subscribed = False
        self._closed = False
        self._log_filter = auth.log_filter()
        self._bodies = BodyCache(body_cache_bytes)
        self._web: dict[str, page.StaticFile] = {}
        self._limits = limits if limits is not None else Limits()
        self.gate = Gate(self._limits)

    # -- lifecycle (event loop)

    async def async_start(self) -> None:
        """Listen on host:port; a second call does nothing."""
        if self._runner is not None:
            return
        if self._closed:
            raise RuntimeError("the service was closed; make a new one")
        self._feed.attach(asyncio.get_running_loop())
        if not self._subscribed:
            self.rig.subscribe(self._feed.from_rig)
            self._subscribed = True
        for name in REDACTED_LOGGERS:
            logging.getLogger(name).addFilter(self._log_filter)
        self._web = await asyncio.to_thread(page.load)  # the phone page, read once
        self.gate.limits = fit_to_open_files(self._limits)
        runner = web.AppRunner(
            self.make_app(),
            access_log_format=ACCESS_LOG_FORMAT,
            shutdown_timeout=SHUTDOWN_S,
            keepalive_timeout=KEEPALIVE_S,
        )
        await runner.setup()
        try:
            await GatedSite(runner, self.gate, self.host, self.port).start()
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
        self._feed.close()
        if self._runner is not None:
            await self._runner.cleanup()
        for name in REDACTED_LOGGERS:
            logging.getLogger(name).removeFilter(self._log_filter)

    def make_app(self) -> web.Application:
        """The aiohttp application of `ROUTES` (subclasses may add routes before start)."""
        app = web.Application(client_max_size=self.max_body,
                              middlewares=[self._in_flight, self._errors])  # fmt: skip
        for route in ROUTES:
            app.router.add_route(route.method, route.path, self._bind(route))
        if self._web:
            page.add_routes(app, self._web)  # outside /v1: static files, no token
        return app

    @property
    def polls_waiting(self) -> int:
        """Long-polls of /v1/changes waiting for a change right now."""
        return self._feed.polls_waiting

    # -- plumbing

    @web.middleware
    async def _in_flight(
        self, request: web.Request, handler: Callable[[web.Request], Awaitable[web.StreamResponse]]
    ) -> web.StreamResponse:
        # While a request is handled its connection has no header deadline (gate.py).
        self.gate.request_started(request.protocol)
        try:
            return await handler(request)
        finally:
            self.gate.request_finished(request.protocol)

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
            if not route.public and not route.token_in_worker:
                await self.authorize(request)
            try:
                args = validate.params(route, request)
            except ApiError:
                if route.token_in_worker:  # a stranger learns nothing of the parameters
                    await self.authorize(request)
                raise
            body = (await validate.body(route, request, self.body_timeout_s)
                    if route.body is not None else {})  # fmt: skip
            return await serve(Call(request, route, args, body))

        return handler

    async def authorize(self, request: web.Request) -> None:
        """Raise ApiError 401, 429 or 503 unless the request carries the rig's token."""
        # Auth.check stats the token file: a syscall, so off the loop like any other.
        verdict = await asyncio.to_thread(self._check_token, request)
        self._admit(request, verdict)

    def _check_token(self, request: web.Request) -> AuthResult:
        """The verdict on the request's token (worker thread: it stats the token file)."""
        return self.auth.check(request.headers.get("Authorization"), request.remote or "")

    def _admit(self, request: web.Request, verdict: AuthResult) -> None:
        """Raise ApiError 401, 429 or 503 unless `verdict` lets the request in."""
        peer = request.remote or ""
        status = verdict.http_status
        if status == 429:
            wait = max(1, math.ceil(self.auth.retry_after(peer)))  # RFC 9110 §10.2.3: seconds
            raise ApiError(429, "rate_limited", f"too many failed attempts; retry in {wait} s",
                           {"Retry-After": str(wait)})  # fmt: skip
        if status == 503:
            raise ApiError(503, "unavailable", "the rig's token file cannot be used; see its log")
        if status != 200:
            raise ApiError(401, "unauthorized", "")

    async def _answer_once(
        self, what: str, body: Payload, act: Callable[[], Awaitable[Outcome]]
    ) -> web.Response:
        status, payload, headers = await self._once.run(what, body, act)
        return json_response(payload, status, headers)

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
                   "link": self.rig.view().link_state.value}  # fmt: skip
        return json_response(payload, 200 if store_ok else 503)

    async def _on_openapi(self, call: Call) -> web.StreamResponse:
        return web.Response(text=openapi_text(), content_type=JSON)

    # -- reading

    async def _on_state(self, call: Call) -> web.StreamResponse:
        snapshot = await asyncio.to_thread(self.rig.snapshot)
        last_seq = await asyncio.to_thread(self.store.last_seq)
        view = self.rig.view()
        return json_response({
            "rig": self.rig_name, "session": snapshot, "device": device_json(view.info),
            "hits_seen": view.hits_seen, "hits_while_disarmed": view.hits_while_disarmed,
            "last_seq": last_seq, "accept": self.running.config.capture.accept.value,
            "channels": [{"label": c.label, "role": str(c.role)}
                         for c in sorted(self.running.config.channels, key=lambda c: c.index)],
            "sensors_missing": _unplaced(view.plan, self.running.config.response_channels),
        })  # fmt: skip

    async def _on_last_hit(self, call: Call) -> web.StreamResponse:
        last = self.rig.view().last_hit
        if last is None:
            raise ApiError(404, "no_hit", "no hit has been captured yet")
        return json_response(last)

    async def _on_tests(self, call: Call) -> web.StreamResponse:
        # Every test with its grid (up to 4,096 points each): read and encoded off the loop.
        return await reply_built(
            call, lambda: {"tests": [test_obj(t) for t in self.store.list_tests()]}
        )

    async def _on_test(self, call: Call) -> web.StreamResponse:
        name = call.args["name"]  # NotFound: 404
        return await reply_built(call, lambda: test_obj(self.store.get_test(name)))

    async def _on_points(self, call: Call) -> web.StreamResponse:
        test = call.args.get("test")
        if test is not None:
            await asyncio.to_thread(self.store.get_test, test)  # NotFound: 404
        rows = await asyncio.to_thread(self.store.list_point_sets, test, call.args.get("since", 0))
        return reply(call, {"points": [objects.point_set_summary_json(s) for s in rows]})

    async def _on_point(self, call: Call) -> web.StreamResponse:
        pid, with_hits = call.args["id"], bool(call.args.get("hits", 0))
        key = (pid, with_hits, http.wants_msgpack(call.request.headers.get("Accept")))
        cached = self._bodies.get(key)
        verdict, encoded = await asyncio.to_thread(
            self._checked_point, call.request, key, cached is None
        )
        self._admit(call.request, verdict)
        encoded = cached or encoded
        if encoded is None:  # NotFound for an id never stored: 404
            encoded = await asyncio.to_thread(encode_point_set, self.store, *key)
            self._bodies.put(key, encoded)
        body, media, digest = encoded
        return web.Response(body=body, content_type=media, headers={"Content-Digest": digest})

    def _checked_point(
        self, request: web.Request, key: tuple[int, bool, bool], read: bool
    ) -> tuple[AuthResult, Encoded | None]:
        """Worker thread, one hop: the token's verdict and, if it admits the request and
        `read`, the body stored at commit (`stored_body`; None: encode it)."""
        verdict = self._check_token(request)
        if verdict.http_status != 200 or not read:
            return verdict, None
        return verdict, stored_body(self.store, *key)

    async def _on_changes(self, call: Call) -> web.StreamResponse:
        since = call.args.get("since", 0)
        changes = await self._feed.poll(
            lambda: asyncio.to_thread(self.store.changes, since, CHANGES_LIMIT),
            call.args.get("wait", 0.0),
        )
        objs = [objects.change_to_obj(records.change_from_record(c)) for c in changes]
        last = changes[-1].seq if changes else since
        return reply(call, {"changes": objs, "last_seq": last,
                            "more": len(changes) == CHANGES_LIMIT})  # fmt: skip

    async def _on_events(self, call: Call) -> web.StreamResponse:
        return await self._feed.stream(call.request)

    # -- writing

    async def _on_create_test(self, call: Call) -> web.StreamResponse:
        return await self._answer_once("create_test", call.body, lambda: self._create(call.body))

    async def _create(self, body: Payload) -> Outcome:
        def parsed() -> tuple[list[GridPoint], str | None]:  # up to 4,096 points: off the loop
            grid = validate.grid(body)
            return grid, validate.outline(body, grid)

        grid, outline = await asyncio.to_thread(parsed)
        mode = RovingMode(body.get("roving_mode", "hammer"))
        reference = body.get("reference")
        if mode is RovingMode.SENSOR and reference not in {None, *(p.label for p in grid)}:
            raise invalid(f"body.reference: {reference!r} is not a label of the grid")
        sensors: dict[str, str | tuple[str, str]] = dict(body.get("sensor_points", {}))
        for label, where in body.get("sensors", {}).items():
            sensors[label] = (where["at"], where.get("direction", "+z"))
        name = body["name"]

        def made() -> dict[str, Any]:  # up to 4,096 points again: off the loop
            if mode is RovingMode.HAMMER:
                try:
                    placement.test_places(self.running.config.response_channels, sensors, grid,
                                          reference)  # fmt: skip
                except ValueError as exc:
                    raise invalid(f"body.sensors: {exc}") from None
            self.rig.create_test(name, grid, mode, reference, body.get("averages"), sensors,
                                 outline)  # AlreadyExists: 409  # fmt: skip
            return test_obj(self.store.get_test(name))

        obj = await asyncio.to_thread(made)
        self._feed.wake()
        return 201, obj, {"Location": f"{PREFIX}/tests/{name}"}

    async def _on_session(self, call: Call) -> web.StreamResponse:
        action = call.route.action
        assert action is not None
        return await self._answer_once(f"session/{action}", call.body,
                                       lambda: self._act(action, call.body))  # fmt: skip

    async def _act(self, action: str, body: Payload) -> Outcome:
        rig = self.rig
        simple: dict[str, Callable[[], None]] = {
            "arm": rig.arm, "disarm": rig.disarm, "redo": rig.redo,
            "next": functools.partial(rig.step, 1), "previous": functools.partial(rig.step, -1),
            "select": functools.partial(rig.select_test, body.get("test", "")),
            "goto": functools.partial(rig.goto, body.get("point", "")),
            "undo": rig.undo,
            "remeasure": functools.partial(rig.measure_again, body.get("point", "")),
        }  # fmt: skip
        out: Payload = {"action": action, "request_id": body["request_id"]}
        if action in ("accept", "reject"):
            decide = rig.accept if action == "accept" else rig.reject
            out["outcome"] = outcome_json(await asyncio.to_thread(decide))
        else:  # an unknown test or point is NotFound: 404
            await asyncio.to_thread(simple[action])
        out["state"] = await asyncio.to_thread(rig.snapshot)
        return 200, out, {}
