"""Client pull throughput: a full pull of `sets` point sets into an empty mirror, over loopback.

The rig side is the real service on a real store (4 responses × 8193 lines per point set,
synthetic arrays committed as the rig commits, like bench_service.py). Printed beside the
pull, from the same server in the same run: a plain HTTP download of the same bodies with
the same client library (http.client, one kept-alive connection), nothing verified or
stored; and the disk's durable write speed in the same folder (the same number of bytes
written and fsynced once). A pull must land on disk durably, so its ceiling is the slower
of the two. Goal: the pull at least 0.5 of that ceiling.

Run: python tests/bench/bench_pull.py [--sets 200]
"""

from __future__ import annotations

import argparse
import asyncio
import http.client
import os
import tempfile
import threading
import time
from pathlib import Path

from bench_service import fill_store
from table import Figure, Row, pick, show

from taprig.client.mirror import Mirror
from taprig.client.pull import pull
from taprig.client.remote import RigClient
from taprig.daemon.api.service import Service
from taprig.daemon.auth import Auth
from taprig.daemon.config import load_config
from taprig.daemon.lifespan import start_rig
from taprig.schema.http import MSGPACK

GOAL_RATIO = 0.5


def plain_download(port: int, token: str, ids: list[int]) -> int:
    """GET every body in turn on one kept-alive connection; bytes received."""
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=60)
    headers = {"Authorization": f"Bearer {token}", "Accept": MSGPACK}
    total = 0
    try:
        for pid in ids:
            conn.request("GET", f"/v1/points/{pid}", headers=headers)
            resp = conn.getresponse()
            total += len(resp.read())
            assert resp.status == 200
    finally:
        conn.close()
    return total


def durable_write(folder: Path, size: int) -> float:
    """MB/s of writing `size` bytes to a new file in `folder` in 4 MiB pieces, then fsync."""
    piece = os.urandom(4 << 20)
    path = folder / "disk-ceiling.bin"
    t0 = time.perf_counter()
    with path.open("wb") as fh:
        for _ in range(0, size, len(piece)):
            fh.write(piece)
        fh.flush()
        os.fsync(fh.fileno())
    seconds = time.perf_counter() - t0
    path.unlink()
    return size / seconds / 1e6


def run(sets: int) -> list[Row]:
    with tempfile.TemporaryDirectory() as tmp:
        cfg = load_config(None, [f"store.data_dir={tmp}/rig", "store.min_free_mb=1"])
        running = start_rig(cfg)
        loop = asyncio.new_event_loop()
        thread = threading.Thread(target=loop.run_forever, name="bench-loop")
        thread.start()
        try:
            fill_store(running.store, sets)
            auth = Auth(Path(tmp) / "rig")
            # No cache of encoded bodies: every request of both runs reads the store.
            service = Service(running, auth, body_cache_bytes=0)
            asyncio.run_coroutine_threadsafe(service.async_start(), loop).result(30)
            ids = [s.id for s in running.store.list_point_sets()]
            t0 = time.perf_counter()
            got = plain_download(service.port, auth.token, ids)
            plain_mb_s = got / (time.perf_counter() - t0) / 1e6
            with (
                RigClient(f"http://127.0.0.1:{service.port}", auth.token) as client,
                Mirror(Path(tmp) / "mirror.sqlite3") as mirror,
            ):
                report = pull(client, mirror)
            assert report.point_sets == sets and report.bytes == got
            disk_mb_s = durable_write(Path(tmp), got)
            asyncio.run_coroutine_threadsafe(service.async_close(), loop).result(30)
        finally:
            loop.call_soon_threadsafe(loop.stop)
            thread.join(30)
            loop.close()
            running.close()
    ceiling = min(plain_mb_s, disk_mb_s)
    return [
        (f"full pull of {sets} point sets into a mirror", report.mb_per_s, "MB/s",
         f"goal >= {GOAL_RATIO * ceiling:.0f} ({GOAL_RATIO:g} x ceiling)"),
        ("plain HTTP download of the same bodies", plain_mb_s, "MB/s", "ceiling (network)"),
        ("durable write of the same bytes", disk_mb_s, "MB/s", "ceiling (disk)"),
        ("pull / slower ceiling", report.mb_per_s / ceiling, "", f"goal >= {GOAL_RATIO:g}"),
        ("bytes per point set", got / sets / 1e6, "MB", ""),
    ]  # fmt: skip


def headline(rows: list[Row]) -> list[Figure]:
    plain, disk = pick(rows, "plain HTTP download"), pick(rows, "durable write")
    ceiling = min(plain, disk)
    return [Figure("client pull into an empty mirror", pick(rows, "full pull"), "MB/s", ">=",
                   GOAL_RATIO * ceiling, ceiling, "the slower of network, disk")]  # fmt: skip


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sets", type=int, default=200)
    show(run(parser.parse_args().sets), decimals=2)


if __name__ == "__main__":
    main()
