"""A hostile neighbour and a paired client, for the fault tests and the benchmark.

`Neighbour` holds many idle connections to a rig from one loopback source address (the whole
127.0.0.0/8 is loopback on Linux, so 127.0.0.1 and 127.0.0.2 are two distinct peers),
replacing those the rig closes, and can dribble request headers out slowly. `PairedClient`
is a workstation holding the rig's token, on one kept-alive connection from another address,
timing each answer.
"""

from __future__ import annotations

import contextlib
import http.client
import json
import resource
import selectors
import socket
import time
from typing import Any

NEEDED_FDS = 2_000 + 256  # the neighbour's connections and the test's own files


def raise_open_file_limit(wanted: int = NEEDED_FDS) -> int:
    """Raise this process's soft RLIMIT_NOFILE towards `wanted` (at most the hard limit);
    the number of connections a neighbour can then hold (2,000 when the hard limit allows)."""
    soft, hard = resource.getrlimit(resource.RLIMIT_NOFILE)
    target = wanted if hard == resource.RLIM_INFINITY else min(wanted, hard)
    if soft != resource.RLIM_INFINITY and soft < target:
        resource.setrlimit(resource.RLIMIT_NOFILE, (target, hard))
        soft = target
    return min(2_000, int(soft) - 256) if soft != resource.RLIM_INFINITY else 2_000


class Neighbour:
    """Up to `count` idle TCP connections to 127.0.0.1:`port` from `source`."""

    def __init__(self, port: int, count: int, source: str = "127.0.0.1") -> None:
        self.port, self.count, self.source = port, count, source
        self._sel = selectors.DefaultSelector()  # epoll: select() stops at 1,024 descriptors
        self.socks: set[socket.socket] = set()
        self.opened = self.closed_by_rig = 0

    def top_up(self, at_most: int | None = None) -> int:
        """Open connections until `count` are held (or `at_most` more); how many were opened."""
        self._reap()
        n = self.count - len(self.socks)
        n = n if at_most is None else min(n, at_most)
        for _ in range(n):
            s = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
            s.bind((self.source, 0))
            s.setblocking(False)
            err = s.connect_ex(("127.0.0.1", self.port))
            if err not in (0, 115):  # 115: EINPROGRESS
                s.close()
                continue
            self._sel.register(s, selectors.EVENT_READ)
            self.socks.add(s)
            self.opened += 1
        return n

    def _reap(self) -> None:
        """Forget the connections the rig has answered or closed."""
        for key, _ in self._sel.select(timeout=0):
            s = key.fileobj
            assert isinstance(s, socket.socket)
            self._sel.unregister(s)
            self.socks.discard(s)
            self.closed_by_rig += 1
            s.close()

    def close(self) -> None:
        for s in self.socks:
            with contextlib.suppress(OSError):
                self._sel.unregister(s)
            s.close()
        self.socks.clear()
        self._sel.close()


def slow_connection(port: int, source: str, first: bytes) -> socket.socket:
    """A connection from `source` that has sent `first` (part of a request) and then waits."""
    s = socket.create_connection(("127.0.0.1", port), timeout=5, source_address=(source, 0))
    s.sendall(first)
    return s


def closed_within(
    s: socket.socket, timeout: float, dribble: bytes = b"", every: float = 0.2
) -> tuple[bool, bytes]:
    """Until the rig closes `s` or `timeout` passes; send `dribble` every `every` s meanwhile.

    (closed, what the rig sent before closing).
    """
    got = b""
    deadline = time.monotonic() + timeout
    while (left := deadline - time.monotonic()) > 0:
        s.settimeout(min(every, left))
        try:
            chunk = s.recv(65536)
        except TimeoutError:
            if dribble:
                try:
                    s.sendall(dribble)
                except OSError:
                    return True, got
            continue
        except ConnectionResetError:
            return True, got
        if not chunk:
            return True, got
        got += chunk
    return False, got


class PairedClient:
    """A workstation with the token, on one kept-alive connection from `source`."""

    def __init__(self, port: int, token: str, source: str = "127.0.0.2") -> None:
        self.port, self.token, self.source = port, token, source
        self.conn = http.client.HTTPConnection("127.0.0.1", port, timeout=10,
                                               source_address=(source, 0))  # fmt: skip
        self.latencies: list[float] = []

    def ask(self, path: str) -> tuple[int, Any]:
        """GET `path`; (status, JSON body); the time it took is kept in `latencies`."""
        t0 = time.monotonic()
        self.conn.request("GET", path, headers={"Authorization": f"Bearer {self.token}"})
        resp = self.conn.getresponse()
        body = resp.read()
        self.latencies.append(time.monotonic() - t0)
        return resp.status, json.loads(body)

    def close(self) -> None:
        self.conn.close()


def raw_get(port: int, source: str, path: str, token: str = "") -> tuple[int, bytes]:
    """One GET on a new connection from `source`: (status, body); status 0 if closed unanswered."""
    with socket.create_connection(("127.0.0.1", port), timeout=10, source_address=(source, 0)) as s:
        auth = f"Authorization: Bearer {token}\r\n" if token else ""
        s.sendall(f"GET {path} HTTP/1.1\r\nHost: rig\r\n{auth}Connection: close\r\n\r\n".encode())
        data = b""
        with contextlib.suppress(ConnectionResetError):
            while chunk := s.recv(65536):
                data += chunk
    if not data.startswith(b"HTTP/1.1 "):
        return 0, data
    head, _, body = data.partition(b"\r\n\r\n")
    return int(head.split()[1]), body
