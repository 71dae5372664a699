"""A small control interface for a simulated test piece in another process.

JSON lines over a loopback TCP socket: one request object per line, one
reply object per line. Requests:

    {"op": "tap", "point": "B3", "force_n": 30, "width_s": 0.0008,
     "double_hit": false, "overload": false}        -> {"ok": true, "tap": {...}}
      ("unplug_after_s": 0.02 pulls the cable that long after the tap, in device time)
    {"op": "fault", "name": "corrupt_probability", "value": 0.01} -> {"ok": true}
    {"op": "unplug"} / {"op": "replug"}               -> {"ok": true}
    {"op": "move_sensor", "sensor": "acc1", "point": "C4"} -> {"ok": true}
    {"op": "state"}                                   -> {"ok": true, "streaming": ..., ...}

A tap answers once its samples are on the wire; when an overrun of the simulated converter
(a host too busy to keep the simulation in real time) swallowed them, the instrument taps again,
as an operator would who saw no response (`SimulatedPiece.strike`).
A bad request gets {"ok": false, "error": "..."} and changes nothing.
`ControlServer` serves it; `ControlClient` is the other end, for the demo and tests.
"""

from __future__ import annotations

import dataclasses
import json
import logging
import math
import socket
import socketserver
import threading
from typing import Any

from .instrument import Faults, SimulatedPiece

log = logging.getLogger(__name__)

MAX_LINE = 4096
_FAULTS = {f.name: f.type for f in dataclasses.fields(Faults)}


def handle_request(piece: SimulatedPiece, request: Any) -> dict[str, Any]:
    """Carry out one request; never raises for bad input."""
    if not isinstance(request, dict) or not isinstance(request.get("op"), str):
        return {"ok": False, "error": 'a request is a JSON object with a string "op"'}
    op = request["op"]
    try:
        if op == "tap":
            point = str(request["point"])
            if point not in set(piece.model.grid):
                return {"ok": False, "error": f"tap: point {point[:64]!r} is not on the simulated "
                        f"piece (its points: {', '.join(piece.model.grid)})"}  # fmt: skip
            rec = piece.strike(
                point,
                _opt_float(request, "force_n"),
                _opt_float(request, "width_s"),
                double_hit=_opt_bool(request, "double_hit"),
                overload=_opt_bool(request, "overload"),
                unplug_after_s=_opt_float(request, "unplug_after_s"),
            )
            if rec is None:
                return {"ok": False, "error": "the instrument is not streaming (send START)"}
            return {"ok": True, "tap": dataclasses.asdict(rec)}
        if op == "fault":
            return _set_fault(piece, request)
        if op == "unplug":
            piece.unplug()
            return {"ok": True}
        if op == "replug":
            piece.replug()
            return {"ok": True}
        if op == "move_sensor":
            piece.move_sensor(str(request["sensor"]), str(request["point"]))
            return {"ok": True}
        if op == "state":
            c = piece.counters
            return {
                "ok": True,
                "streaming": piece.streaming,
                "url": piece.url,
                "rate_hz": piece.rate_hz,
                "frames_sent": c.frames_sent,
                "overruns": c.overruns,
                "taps_lost": c.taps_lost,
                "taps": len(c.taps),
                "faults": dataclasses.asdict(piece.faults),
            }
    except KeyError as exc:
        return {"ok": False, "error": f"{op}: missing field {exc}"}
    except (ValueError, TimeoutError, ArithmeticError) as exc:  # 10**400: OverflowError
        return {"ok": False, "error": f"{op}: {exc}"}
    return {
        "ok": False,
        "error": f"unknown op {op!r}; allowed tap, fault, unplug, replug, move_sensor, state",
    }


def _opt_float(request: dict[str, Any], key: str) -> float | None:
    value = request.get(key)
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise ValueError(f"{key} must be a number, got {str(value)[:64]}")
    try:
        number = float(value)
    except OverflowError:
        raise ValueError(f"{key} is too large") from None
    if not math.isfinite(number):
        raise ValueError(f"{key} must be finite")
    return number


def _opt_bool(request: dict[str, Any], key: str) -> bool | None:
    value = request.get(key)
    if value is None or isinstance(value, bool):
        return value
    raise ValueError(f"{key} must be true or false, got {value!r}")


def _set_fault(piece: SimulatedPiece, request: dict[str, Any]) -> dict[str, Any]:
    name, value = request.get("name"), request.get("value")
    if name not in _FAULTS:
        return {"ok": False, "error": f"fault {name!r} is unknown; allowed {', '.join(_FAULTS)}"}
    if name == "stalled":
        if not isinstance(value, bool):
            return {"ok": False, "error": "stalled must be true or false"}
    elif isinstance(value, bool) or not isinstance(value, int | float) or not 0 <= value <= 1:
        return {"ok": False, "error": f"{name} is a probability 0..1, got {value!r}"}
    setattr(piece.faults, str(name), value)
    return {"ok": True}


class _Handler(socketserver.StreamRequestHandler):
    server: _Server

    def handle(self) -> None:
        while True:
            line = self.rfile.readline(MAX_LINE + 1)
            if not line:
                return
            if len(line) > MAX_LINE:
                reply: dict[str, Any] = {"ok": False, "error": f"line longer than {MAX_LINE}"}
                self.wfile.write((json.dumps(reply) + "\n").encode())
                return
            try:
                request = json.loads(line)
            except (json.JSONDecodeError, UnicodeDecodeError) as exc:
                reply = {"ok": False, "error": f"not JSON: {exc}"}
            else:
                reply = handle_request(self.server.instrument, request)
            self.wfile.write((json.dumps(reply) + "\n").encode())


class _Server(socketserver.ThreadingTCPServer):
    daemon_threads = True
    allow_reuse_address = True
    instrument: SimulatedPiece


class ControlServer:
    """Serves the control interface of `piece` on 127.0.0.1:`port` (0: a free port)."""

    def __init__(self, piece: SimulatedPiece, port: int = 0) -> None:
        self._server = _Server(("127.0.0.1", port), _Handler)
        self._server.instrument = piece
        self.port: int = self._server.server_address[1]
        self._thread = threading.Thread(
            target=self._server.serve_forever, kwargs={"poll_interval": 0.1}, name="piece-control"
        )
        self._closed = False

    def start(self) -> ControlServer:
        self._thread.start()
        return self

    def close(self) -> None:
        if self._closed:
            return
        self._closed = True
        if self._thread.is_alive():
            self._server.shutdown()
            self._thread.join(timeout=5.0)
        self._server.server_close()


class ControlClient:
    """The other end of a `ControlServer` on 127.0.0.1:`port`: one connection, kept open.

    `request(op, **fields)` sends one request and returns the reply object, ok or not;
    `close()` is idempotent (also on leaving a `with` block).
    """

    def __init__(self, port: int, timeout_s: float = 10.0) -> None:
        self._sock = socket.create_connection(("127.0.0.1", port), timeout=timeout_s)
        self._lines = self._sock.makefile("rb")
        self._closed = False

    def request(self, op: str, **fields: Any) -> dict[str, Any]:
        self._sock.sendall((json.dumps({"op": op, **fields}) + "\n").encode())
        line = self._lines.readline(MAX_LINE + 1)
        if not line:
            raise ConnectionError("the control port closed the connection without a reply")
        reply: dict[str, Any] = json.loads(line)
        return reply

    def close(self) -> None:
        if not self._closed:
            self._closed = True
            self._lines.close()
            self._sock.close()

    def __enter__(self) -> ControlClient:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
