"""HTTP service throughput and latency over loopback.

1. Pull of `sets` point sets (4 responses × 8193 lines each, synthetic arrays committed
   straight into a temporary store; no capture) as msgpack, one GET /v1/points/{id} after
   the other, in MB/s of body (the store holds each body as encoded at commit, as taprigd
   runs it). Printed beside it, from the same server in the same run: the
   same bodies pre-built and returned one per request (the cost of HTTP per request without
   the store and the encoding), and all of them as one pre-built blob in one response (the
   loopback and aiohttp ceiling). Goal: the pull at least 0.8 of the blob.
   The client here is aiohttp on the service's own event loop: every figure is the work of
   both sides on one thread, so HTTP's cost per request counts twice. The workstation's pull
   against the rig in a process of its own, with each side's CPU, is bench_pull.py.
2. An empty changes poll (GET /v1/changes?since=<last>&wait=0, token checked, store
   queried): median latency over `polls` requests. Goal: at most 20 ms.

Run: python tests/bench/bench_service.py [--sets 200] [--polls 200]
"""

from __future__ import annotations

import argparse
import asyncio
import math
import statistics
import tempfile
import time
from pathlib import Path

import aiohttp
import numpy as np
from aiohttp import web
from table import Figure, Row, pick, show

from taprig.daemon.api.bodies import encode_point_set
from taprig.daemon.api.service import Service
from taprig.daemon.auth import Auth
from taprig.daemon.config import load_config
from taprig.daemon.lifespan import RunningRig
from taprig.daemon.records import GridPoint, PointSet, RovingMode
from taprig.daemon.rig import Rig
from taprig.daemon.store import Store
from taprig.daemon.wirebody import encode_body
from taprig.schema import codec
from taprig.schema.http import MSGPACK

N_RESP = 4
N_FREQ = 8193
GOAL_RATIO = 0.8
GOAL_POLL_MS = 20.0
BLOB_PIECE = 1 << 20  # bytes per write of the one-blob ceiling


def fill_store(store: Store, sets: int) -> None:
    """One test of `sets` points, each with one point set of random arrays."""
    rng = np.random.default_rng(11)
    grid = [GridPoint(f"P{i}", 0.01 * i, 0.0, 0.0) for i in range(sets)]
    store.save_test("bench", grid, RovingMode.HAMMER, "P0", 4)

    def cplx() -> np.ndarray:
        return rng.normal(size=(N_RESP, N_FREQ)) + 1j * rng.normal(size=(N_RESP, N_FREQ))

    for p in grid:
        store.commit_point_set(PointSet(
            test="bench", point=p.label, version=0, roving_mode=RovingMode.HAMMER,
            drive_point=p.label, response_labels=tuple(f"acc{k}" for k in range(N_RESP)),
            response_points=tuple(f"S{k}" for k in range(N_RESP)), n_averages=4,
            freq_hz=np.linspace(0.0, 25_600.0, N_FREQ), h1=cplx(), h2=cplx(),
            coherence=rng.uniform(size=(N_RESP, N_FREQ)), gff=rng.uniform(size=N_FREQ),
            gxx=rng.uniform(size=(N_RESP, N_FREQ)), gfx=cplx(), hits=(),
        ))  # fmt: skip


class BenchService(Service):
    """The service with two more routes serving pre-built bytes behind the same token check."""

    blobs: dict[int, bytes]
    blob = b""

    def make_app(self) -> web.Application:
        app = super().make_app()

        async def one(request: web.Request) -> web.Response:
            await self.authorize(request)
            return web.Response(body=self.blobs[int(request.match_info["id"])],
                                content_type=MSGPACK)  # fmt: skip

        async def whole(request: web.Request) -> web.StreamResponse:
            await self.authorize(request)
            resp = web.StreamResponse()
            resp.content_type, resp.content_length = MSGPACK, len(self.blob)
            await resp.prepare(request)
            # In pieces: handed to the transport whole, hundreds of MB would be copied over
            # and over by its buffer (Python 3.11 keeps it in one bytearray).
            view = memoryview(self.blob)
            for i in range(0, len(view), BLOB_PIECE):
                await resp.write(view[i : i + BLOB_PIECE])
            await resp.write_eof()
            return resp

        app.router.add_get("/bench/one/{id}", one)
        app.router.add_get("/bench/blob", whole)
        return app


async def pull(http: aiohttp.ClientSession, paths: list[str], headers: dict[str, str]) -> int:
    """GET every path in turn; bytes of body received."""
    total = 0
    for path in paths:
        async with http.get(path, headers=headers) as resp:
            assert resp.status == 200, resp.status
            # Counted as it arrives, not kept: the same client work for 2 MB and for 400 MB.
            async for piece in resp.content.iter_any():
                total += len(piece)
    return total


async def measure(running: RunningRig, auth: Auth, polls: int) -> list[Row]:
    # No cache of encoded bodies in the service: every timed pull reads the store.
    service = BenchService(running, auth, body_cache_bytes=0)
    ids = [s.id for s in running.store.list_point_sets()]
    # The bytes GET /v1/points/{id} answers, made by the same function.
    service.blobs = {pid: encode_point_set(running.store, pid, False, True)[0] for pid in ids}
    service.blob = b"".join(service.blobs.values())
    await service.async_start()
    try:
        base = f"http://127.0.0.1:{service.port}"
        headers = {"Authorization": f"Bearer {auth.token}", "Accept": MSGPACK}
        async with aiohttp.ClientSession(base_url=base) as http:
            t0 = time.perf_counter()
            got = await pull(http, [f"/v1/points/{pid}" for pid in ids], headers)
            pull_mb_s = got / (time.perf_counter() - t0) / 1e6
            t0 = time.perf_counter()
            parts = await asyncio.gather(
                *(pull(http, [f"/v1/points/{pid}" for pid in ids[k::4]], headers)
                  for k in range(4))
            )  # fmt: skip
            par_mb_s = sum(parts) / (time.perf_counter() - t0) / 1e6
            assert sum(parts) == got == len(service.blob)
            t0 = time.perf_counter()
            assert await pull(http, [f"/bench/one/{pid}" for pid in ids], headers) == got
            one_mb_s = got / (time.perf_counter() - t0) / 1e6
            t0 = time.perf_counter()
            assert await pull(http, ["/bench/blob"], headers) == got
            blob_mb_s = got / (time.perf_counter() - t0) / 1e6

            last = running.store.last_seq()
            times = []
            for _ in range(polls):
                t0 = time.perf_counter()
                async with http.get(f"/v1/changes?since={last}&wait=0", headers=headers) as r:
                    assert r.status == 200 and not codec.unpack(
                        await r.read(), max_bytes=1 << 16)["changes"]  # fmt: skip
                times.append(time.perf_counter() - t0)
    finally:
        await service.async_close()
    poll_ms = statistics.median(times) * 1e3
    size = f"{len(ids)} sets of {got / len(ids) / 1e6:.2f} MB"
    return [
        ("pull point sets as msgpack, one at a time", pull_mb_s, "MB/s",
         f"{size}; {pull_mb_s / blob_mb_s:.2f} of the blob (goal >= {GOAL_RATIO:g})"),
        ("pull point sets as msgpack, 4 at a time", par_mb_s, "MB/s",
         f"{par_mb_s / blob_mb_s:.2f} of the blob; 4 connections"),
        ("ceiling: same bodies pre-built", one_mb_s, "MB/s", "one per request, same server"),
        ("ceiling: one pre-built blob", blob_mb_s, "MB/s", "all bodies in one response"),
        ("pull / blob", pull_mb_s / blob_mb_s, "", f"goal >= {GOAL_RATIO:g}"),
        ("pull / same bodies pre-built", pull_mb_s / one_mb_s, "",
         "what the store and the token check cost beside HTTP's own per-request cost"),
        ("empty changes poll (wait=0), median", poll_ms, "ms",
         f"goal <= {GOAL_POLL_MS:g} ms; {polls} polls, p90 "
         f"{np.percentile(times, 90) * 1e3:.2f} ms"),
    ]  # fmt: skip


def run(sets: int = 200, polls: int = 200) -> list[Row]:
    with tempfile.TemporaryDirectory(prefix="taprig-bench-") as tmp:
        cfg = load_config(None, [f"store.data_dir={tmp}/data"])
        store = Store(cfg.store.data_dir, body_encoder=encode_body)  # as taprigd opens it
        # The rig is never started: the service only reads the store here.
        running = RunningRig(cfg, store, Rig(cfg, store))
        try:
            fill_store(store, sets)
            return asyncio.run(measure(running, Auth(Path(tmp) / "auth"), polls))
        finally:
            running.close()


def headline(rows: list[Row]) -> list[Figure]:
    blob = pick(rows, "ceiling: one pre-built blob")
    pull = pick(rows, "pull point sets as msgpack, one")
    return [
        Figure("service pull, msgpack, one at a time", pull, "MB/s", ">=", GOAL_RATIO * blob,
               blob, "one pre-built blob"),
        Figure("empty changes poll, median", pick(rows, "empty changes poll"), "ms", "<=",
               GOAL_POLL_MS, math.nan, ""),
    ]  # fmt: skip


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sets", type=int, default=200)
    parser.add_argument("--polls", type=int, default=200)
    args = parser.parse_args()
    show(run(args.sets, args.polls))
