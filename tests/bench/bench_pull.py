"""Client pull over loopback: what a pull fetches and keeps, beside the same bytes as one blob.

The rig is the real service on a real store (4 responses × 8193 lines per point set, random
arrays committed as the rig commits them, bench_service.fill_store) in a process of its own,
as on a network it is another machine: the service's event loop and the client's threads
share no GIL. What is compared, every figure from the same run (best of `rounds` runs, the
kinds interleaved, so a busy machine hurts them alike):

- blob: every stored body joined into one, pre-built in the service's memory and sent as one
  response behind the same token check (bench_service.BenchService's /bench/blob), received
  by the client's HTTP library (http.client, one connection) in 1 MiB pieces into one reused
  buffer; nothing checked, nothing kept. The ceiling of loopback, aiohttp and http.client.
- blob + SHA-256: the same, each piece hashed as it arrives: the least a transfer that
  verifies its bytes has to do (SHA-256 is the Content-Digest's algorithm, RFC 9530).
- pull: every point set as a pull receives it (client/prefetch.Prefetch: one GET
  /v1/points/{id} each, two in flight on two connections, the stored body checked against
  its Content-Digest and decoded strictly), taken in order; everything a pull does but the
  disk.
- full pull: client/pull.pull into an empty mirror, durable on disk.
- durable write: the same number of bytes written and fsynced once, in the same folder.

The issue's ratio is pull / blob (goal 0.8); pull / (blob + SHA-256) says how much of what is
left is the verification itself. The CPU each process spends per MB (the service's from its
own process_time, the client's from ours) says where the time goes. The full pull is held to
its own ceiling, the slower of the blob and the disk (goal 0.5 of it).

Run: python tests/bench/bench_pull.py [--sets 200] [--rounds 3]
"""

from __future__ import annotations

import argparse
import asyncio
import functools
import hashlib
import http.client
import json
import os
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

from table import Figure, Row, pick, show

from taprig.client.mirror import Mirror
from taprig.client.prefetch import FETCHERS, Prefetch
from taprig.client.pull import pull
from taprig.client.remote import RigClient
from taprig.schema.http import MSGPACK

GOAL_RATIO = 0.8  # pull / blob
GOAL_FULL = 0.5  # full pull / the slower of blob and disk
PIECE = 1 << 20  # bytes per read of the blob


class RigProcess:
    """The service on a filled store in a child process (this file with --serve); tells its
    CPU seconds on request."""

    def __init__(self, sets: int, folder: Path) -> None:
        self.proc = subprocess.Popen(
            [sys.executable, __file__, "--serve", str(sets), str(folder)],
            stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True,
        )  # fmt: skip
        assert self.proc.stdout is not None
        hello = json.loads(self.proc.stdout.readline() or "null")
        assert hello is not None, "the rig process did not start"
        self.url, self.token = f"http://127.0.0.1:{hello['port']}", str(hello["token"])
        self.ids: list[int] = hello["ids"]

    def cpu_s(self) -> float:
        assert self.proc.stdin is not None and self.proc.stdout is not None
        self.proc.stdin.write("cpu\n")
        self.proc.stdin.flush()
        return float(self.proc.stdout.readline())

    def close(self) -> None:
        assert self.proc.stdin is not None
        self.proc.stdin.close()
        self.proc.wait(60)


def blob(rig: RigProcess, hashed: bool) -> int:
    """Receive /bench/blob in PIECE reads into one buffer (SHA-256 of each piece if `hashed`);
    bytes received."""
    port = int(rig.url.rsplit(":", 1)[1])
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=60)
    buf = memoryview(bytearray(PIECE))
    digest = hashlib.sha256()
    total = 0
    try:
        conn.request(
            "GET",
            "/bench/blob",
            headers={"Authorization": f"Bearer {rig.token}", "Accept": MSGPACK},
        )
        resp = conn.getresponse()
        assert resp.status == 200, resp.status
        while n := resp.readinto(buf):
            total += n
            if hashed:
                digest.update(buf[:n])
    finally:
        conn.close()
    return total


def fetched(rig: RigProcess) -> int:
    """Every point set through Prefetch (fetched, verified, decoded), in order; body bytes."""
    with RigClient(rig.url, rig.token) as client, Prefetch(client, rig.ids) as bodies:
        return sum(len(bodies.take(pid).body) for pid in rig.ids)


def full_pull(rig: RigProcess, folder: Path) -> int:
    """client/pull.pull into a new, empty mirror (deleted afterwards); body bytes stored."""
    path = folder / "mirror.sqlite3"
    try:
        with RigClient(rig.url, rig.token) as client, Mirror(path) as mirror:
            report = pull(client, mirror)
        assert report.point_sets == len(rig.ids)
        return report.bytes
    finally:
        path.unlink(missing_ok=True)


def durable_write(folder: Path, size: int) -> int:
    """Write `size` bytes to a new file in `folder` in 4 MiB pieces, then fsync; bytes."""
    piece = os.urandom(4 << 20)
    path = folder / "disk-ceiling.bin"
    with path.open("wb") as fh:
        for _ in range(0, size, len(piece)):
            fh.write(piece)
        fh.flush()
        os.fsync(fh.fileno())
    written = path.stat().st_size
    path.unlink()
    return written


def sha256_alone(size: int) -> int:
    """SHA-256 of one body-sized buffer, `size` bytes in all, on this thread; bytes hashed."""
    body = os.urandom(1_150_000)
    for _ in range(0, size, len(body)):
        hashlib.sha256(body).digest()
    return -(-size // len(body)) * len(body)


@dataclass
class Best:
    """The best run of one kind: MB/s, and the least CPU per MB each side spent (ms/MB)."""

    mb_s: float = 0.0
    server_ms: float = float("inf")
    client_ms: float = float("inf")


def timed(rig: RigProcess | None, best: Best, work: Callable[[], int]) -> int:
    s0 = rig.cpu_s() if rig else 0.0
    c0, t0 = time.process_time(), time.perf_counter()
    size = work()
    seconds, client_s = time.perf_counter() - t0, time.process_time() - c0
    server_s = rig.cpu_s() - s0 if rig else 0.0
    best.mb_s = max(best.mb_s, size / seconds / 1e6)
    best.server_ms = min(best.server_ms, server_s / size * 1e9)
    best.client_ms = min(best.client_ms, client_s / size * 1e9)
    return size


def run(sets: int = 200, rounds: int = 3) -> list[Row]:
    kinds = ("blob", "blob+sha", "pull", "full", "disk", "sha")
    best = {k: Best() for k in kinds}
    with tempfile.TemporaryDirectory(prefix="taprig-bench-") as tmp:
        folder = Path(tmp)
        rig = RigProcess(sets, folder / "rig")
        try:
            blob(rig, False)  # once untimed: the first connection and reads of the run
            for _ in range(rounds):
                size = timed(rig, best["blob"], lambda: blob(rig, False))
                assert timed(rig, best["blob+sha"], lambda: blob(rig, True)) == size
                assert timed(rig, best["pull"], lambda: fetched(rig)) == size
                assert timed(rig, best["full"], lambda: full_pull(rig, folder)) == size
                timed(None, best["disk"], functools.partial(durable_write, folder, size))
                timed(None, best["sha"], functools.partial(sha256_alone, size))
        finally:
            rig.close()
    return rows_of(best, sets, size)


def rows_of(best: dict[str, Best], sets: int, size: int) -> list[Row]:
    b, bs, p, f = best["blob"], best["blob+sha"], best["pull"], best["full"]
    ceiling = min(b.mb_s, best["disk"].mb_s)

    def cpu(x: Best) -> str:
        return f"CPU {x.server_ms:.2f} ms/MB in the rig, {x.client_ms:.2f} in the client"

    return [
        ("blob: all bodies as one pre-built response", b.mb_s, "MB/s",
         f"ceiling; nothing checked or kept; {cpu(b)}"),
        ("blob + SHA-256 as it arrives", bs.mb_s, "MB/s",
         f"least a verified transfer does; {cpu(bs)}"),
        ("pull: fetched, verified, decoded", p.mb_s, "MB/s",
         f"{sets} x GET /v1/points/{{id}}, {FETCHERS} connections (Prefetch); {cpu(p)}"),
        ("pull / blob", p.mb_s / b.mb_s, "", f"goal >= {GOAL_RATIO:g}"),
        ("pull / (blob + SHA-256)", p.mb_s / bs.mb_s, "", "what is left beside the verification"),
        ("SHA-256 alone, one core", best["sha"].mb_s, "MB/s", "hashlib, body-sized buffers"),
        ("full pull into an empty mirror", f.mb_s, "MB/s",
         f"goal >= {GOAL_FULL * ceiling:.0f} ({GOAL_FULL:g} x the slower of blob, disk); {cpu(f)}"),
        ("durable write of the same bytes", best["disk"].mb_s, "MB/s", "ceiling (disk)"),
        ("full pull / slower ceiling", f.mb_s / ceiling, "", f"goal >= {GOAL_FULL:g}"),
        ("bytes per point set", size / sets / 1e6, "MB", ""),
    ]  # fmt: skip


def headline(rows: list[Row]) -> list[Figure]:
    blob_mb_s, disk = pick(rows, "blob: "), pick(rows, "durable write")
    ceiling = min(blob_mb_s, disk)
    return [
        Figure("client pull (fetch, verify, decode)", pick(rows, "pull: "), "MB/s", ">=",
               GOAL_RATIO * blob_mb_s, blob_mb_s, "one pre-built blob, nothing checked"),
        Figure("client pull into an empty mirror", pick(rows, "full pull"), "MB/s", ">=",
               GOAL_FULL * ceiling, ceiling, "the slower of blob, disk"),
    ]  # fmt: skip


async def serve(sets: int, folder: Path) -> None:
    """The rig process: fill a store, serve it, answer each line on stdin with its CPU s."""
    from bench_service import BenchService, fill_store

    from taprig.daemon.api.bodies import encode_point_set
    from taprig.daemon.auth import Auth
    from taprig.daemon.config import load_config
    from taprig.daemon.lifespan import RunningRig
    from taprig.daemon.rig import Rig
    from taprig.daemon.store import Store
    from taprig.daemon.wirebody import encode_body

    cfg = load_config(None, [f"store.data_dir={folder}/data"])
    store = Store(cfg.store.data_dir, body_encoder=encode_body)  # as taprigd opens it
    running = RunningRig(cfg, store, Rig(cfg, store))  # never started: the service only reads
    try:
        await asyncio.to_thread(fill_store, store, sets)
        ids = [s.id for s in store.list_point_sets()]
        # No cache of encoded bodies: every GET /v1/points/{id} reads the store.
        service = BenchService(running, Auth(folder / "auth"), body_cache_bytes=0)
        service.blobs = {p: encode_point_set(store, p, False, True)[0] for p in ids}
        service.blob = b"".join(service.blobs.values())
        await service.async_start()
        print(json.dumps({"port": service.port, "token": service.auth.token, "ids": ids}),
              flush=True)  # fmt: skip
        try:
            while await asyncio.to_thread(sys.stdin.readline):
                print(time.process_time(), flush=True)
        finally:
            await service.async_close()
    finally:
        running.close()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sets", type=int, default=200)
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--serve", nargs=2, metavar=("SETS", "FOLDER"), help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.serve:
        asyncio.run(serve(int(args.serve[0]), Path(args.serve[1])))
    else:
        show(run(args.sets, args.rounds), decimals=2)


if __name__ == "__main__":
    main()
