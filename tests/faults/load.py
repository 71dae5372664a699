"""A busy lab in one process: workstations pulling every new point set, phones listening.

``python -m tests.faults.load PORT TOKEN --pullers 20 --listeners 200 --seconds 60`` runs,
for `seconds`:

- `pullers` workstations, each following the change feed (``/v1/changes``, long-polled) and
  pulling every new point set as msgpack (``/v1/points/{id}``), as `taprig watch` does;
- `listeners` phones, each holding the server-sent event stream (``/v1/events``) open.

Each connection comes from its own loopback address (127.0.x.y), as each workstation and
phone would come from its own host, so the service's per-address share does not refuse them.
It then prints one JSON line: point sets and bytes pulled, events heard, errors met.
"""

from __future__ import annotations

import argparse
import asyncio
import json
import time
from dataclasses import asdict, dataclass

import aiohttp

from taprig.schema.http import MSGPACK


@dataclass
class Tally:
    pulled: int = 0
    bytes: int = 0
    events: int = 0
    listening: int = 0
    errors: int = 0
    last_error: str = ""


def address(n: int) -> str:
    """The n-th client's own loopback address: 127.0.1.1, 127.0.1.2, ... (n from 0)."""
    return f"127.0.{1 + n // 250}.{1 + n % 250}"


def session(n: int, token: str, seconds: float) -> aiohttp.ClientSession:
    connector = aiohttp.TCPConnector(local_addr=(address(n), 0), limit=1)
    timeout = aiohttp.ClientTimeout(total=seconds + 30)
    headers = {"Authorization": f"Bearer {token}"}
    return aiohttp.ClientSession(connector=connector, timeout=timeout, headers=headers)


async def puller(base: str, n: int, token: str, end: float, tally: Tally) -> None:
    async with session(n, token, end - time.monotonic()) as http:
        since = 0
        while time.monotonic() < end:
            try:
                async with http.get(f"{base}/v1/changes", params={"since": since, "wait": 5}) as r:
                    feed = await r.json()
                for change in feed["changes"]:
                    if change["kind"] == "point_set":
                        url = f"{base}/v1/points/{change['point_set_id']}"
                        async with http.get(url, headers={"Accept": MSGPACK}) as r:
                            body = await r.read()
                            if r.status != 200 or r.content_type != MSGPACK:
                                raise RuntimeError(f"point set: {r.status} {r.content_type}")
                        tally.pulled += 1
                        tally.bytes += len(body)
                since = feed["last_seq"]
            except (aiohttp.ClientError, RuntimeError, KeyError, TimeoutError) as exc:
                tally.errors += 1
                tally.last_error = f"puller {n}: {exc!r}"
                await asyncio.sleep(0.2)


async def listener(base: str, n: int, token: str, end: float, tally: Tally) -> None:
    async with session(n, token, end - time.monotonic()) as http:
        try:
            async with http.get(f"{base}/v1/events") as r:
                if r.status != 200:
                    raise RuntimeError(f"events: HTTP {r.status}")
                tally.listening += 1
                while (left := end - time.monotonic()) > 0:
                    try:
                        line = await asyncio.wait_for(r.content.readline(), left)
                    except TimeoutError:
                        break
                    if not line:
                        raise RuntimeError("event stream ended")
                    if line.startswith(b"event:"):
                        tally.events += 1
        except (aiohttp.ClientError, RuntimeError) as exc:
            tally.errors += 1
            tally.last_error = f"listener {n}: {exc!r}"


async def main(port: int, token: str, pullers: int, listeners: int, seconds: float) -> Tally:
    base, tally = f"http://127.0.0.1:{port}", Tally()
    end = time.monotonic() + seconds
    await asyncio.gather(
        *(puller(base, n, token, end, tally) for n in range(pullers)),
        *(listener(base, pullers + n, token, end, tally) for n in range(listeners)),
    )
    return tally


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("port", type=int)
    parser.add_argument("token")
    parser.add_argument("--pullers", type=int, default=20)
    parser.add_argument("--listeners", type=int, default=200)
    parser.add_argument("--seconds", type=float, default=60.0)
    a = parser.parse_args()
    result = asyncio.run(main(a.port, a.token, a.pullers, a.listeners, a.seconds))
    print(json.dumps(asdict(result)), flush=True)
