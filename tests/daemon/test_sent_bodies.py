"""Large point-set bodies sent as stored (GET /v1/points/{id}): a real store, the real
service on 127.0.0.1, read with the standard library's http.client as the workstation
client reads them, one asyncio.run per test.

Each body is compared byte for byte with the store's wire body, and its Content-Digest with
the SHA-256 recomputed here with hashlib (FIPS 180-4; header syntax RFC 9530 §2).
"""

from __future__ import annotations

import asyncio
import base64
import hashlib
import http.client
import logging
import socket
import struct
import time
from collections.abc import Awaitable, Callable, Iterator
from pathlib import Path

import numpy as np
import pytest

from taprig.daemon.api.service import Service
from taprig.daemon.auth import Auth
from taprig.daemon.config import load_config
from taprig.daemon.lifespan import RunningRig
from taprig.daemon.records import GridPoint, PointSet, RovingMode
from taprig.daemon.rig import Rig
from taprig.daemon.store import Store
from taprig.daemon.wirebody import encode_body
from taprig.schema import http as wire_http
from taprig.schema import records

LIMIT_S = 30.0  # the longest any wait here may take
N_RESP, N_FREQ = 8, 16_385  # about 4.2 MB of body: more than loopback's socket buffers take
MIB = 1 << 20


@pytest.fixture
def running(tmp_path: Path) -> Iterator[RunningRig]:
    """A store with one large point set, opened as taprigd opens it (wire bodies at commit);
    the rig is never started: the service only reads the store here."""
    cfg = load_config(None, [f"store.data_dir={tmp_path / 'data'}", "store.min_free_mb=1"])
    store = Store(cfg.store.data_dir, body_encoder=encode_body)
    rng = np.random.default_rng(21)

    def cplx() -> np.ndarray:
        return rng.normal(size=(N_RESP, N_FREQ)) + 1j * rng.normal(size=(N_RESP, N_FREQ))

    store.save_test("big", [GridPoint("A1", 0.0, 0.0, 0.0)], RovingMode.HAMMER, "A1", 2)
    store.commit_point_set(PointSet(
        test="big", point="A1", version=0, roving_mode=RovingMode.HAMMER, drive_point="A1",
        response_labels=tuple(f"acc{k}" for k in range(N_RESP)),
        response_points=("A1",) * N_RESP, n_averages=2,
        freq_hz=np.linspace(0.0, 25_600.0, N_FREQ), h1=cplx(), h2=cplx(),
        coherence=rng.uniform(size=(N_RESP, N_FREQ)), gff=rng.uniform(size=N_FREQ),
        gxx=rng.uniform(size=(N_RESP, N_FREQ)), gfx=cplx(), hits=(),
    ))  # fmt: skip
    try:
        yield RunningRig(cfg, store, Rig(cfg, store))
    finally:
        store.close()


def stored_of(running: RunningRig) -> tuple[int, str, bytes]:
    (summary,) = running.store.list_point_sets()
    stored = running.store.get_wire_body(summary.id, records.SCHEMA_VERSION)
    assert stored is not None
    return summary.id, stored[0], bytes(stored[1])


def get(conn: http.client.HTTPConnection, path: str, token: str) -> http.client.HTTPResponse:
    conn.request("GET", path, headers={"Authorization": f"Bearer {token}",
                                       "Accept": wire_http.MSGPACK})  # fmt: skip
    return conn.getresponse()


async def serving(
    running: RunningRig, auth: Auth, work: Callable[[Service], Awaitable[None]]
) -> None:
    """`work(service)` while the service (no cache of bodies) listens on 127.0.0.1."""
    service = Service(running, auth, body_cache_bytes=0)
    await service.async_start()
    try:
        await work(service)
    finally:
        await service.async_close()


def test_a_large_body_arrives_whole(running: RunningRig, tmp_path: Path) -> None:
    """A stored body of about 4 MB arrives byte for byte with its length and its digest,
    twice on one kept-alive connection."""
    pid, digest, body = stored_of(running)
    assert len(body) > 4 * MIB
    sha = base64.b64encode(hashlib.sha256(body).digest()).decode()
    assert digest == f"sha-256=:{sha}:"
    auth = Auth(tmp_path / "auth")

    def client(port: int) -> None:
        conn = http.client.HTTPConnection("127.0.0.1", port, timeout=LIMIT_S)
        try:
            for _ in range(2):
                resp = get(conn, f"/v1/points/{pid}", auth.token)
                assert resp.status == 200
                assert resp.getheader("Content-Length") == str(len(body))
                assert resp.getheader("Content-Digest") == digest
                assert resp.getheader("Content-Type") == wire_http.MSGPACK
                assert resp.read() == body
                assert not resp.will_close
        finally:
            conn.close()

    asyncio.run(serving(running, auth, lambda service: asyncio.to_thread(client, service.port)))


def test_a_reader_gone_midway_costs_the_next_one_nothing(
    running: RunningRig, tmp_path: Path, caplog: pytest.LogCaptureFixture
) -> None:
    """A client that hangs up (a reset) after half a MB of a body: its connection is let go,
    no warning or traceback is logged for it, and the next request gets the whole body."""
    caplog.set_level(logging.DEBUG)
    pid, _digest, body = stored_of(running)
    auth = Auth(tmp_path / "auth")

    def quitter(port: int) -> None:
        with socket.create_connection(("127.0.0.1", port), timeout=LIMIT_S) as sock:
            head = (
                f"GET /v1/points/{pid} HTTP/1.1\r\nHost: rig\r\nAuthorization: Bearer "
                f"{auth.token}\r\nAccept: {wire_http.MSGPACK}\r\n\r\n"
            )
            sock.sendall(head.encode())
            got = 0
            while got < MIB // 2:
                piece = sock.recv(1 << 16)
                assert piece, "the service hung up first"
                got += len(piece)
            # Linger 0: the close is a reset, as when a laptop lid shuts mid-transfer.
            sock.setsockopt(socket.SOL_SOCKET, socket.SO_LINGER, struct.pack("ii", 1, 0))

    def whole(port: int) -> bytes:
        conn = http.client.HTTPConnection("127.0.0.1", port, timeout=LIMIT_S)
        try:
            resp = get(conn, f"/v1/points/{pid}", auth.token)
            assert resp.status == 200
            return resp.read()
        finally:
            conn.close()

    async def work(service: Service) -> None:
        await asyncio.to_thread(quitter, service.port)
        deadline = time.monotonic() + LIMIT_S
        while service.gate.open > 0:  # the reset reaches the service
            assert time.monotonic() < deadline, "the quitter's connection was kept"
            await asyncio.sleep(0.01)
        assert await asyncio.to_thread(whole, service.port) == body

    asyncio.run(serving(running, auth, work))
    assert [r.getMessage() for r in caplog.records if r.levelno >= logging.WARNING] == []
