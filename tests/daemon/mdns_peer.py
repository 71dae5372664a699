"""A process in the test's network namespace that advertises rigs or browses for them.

test_advertise.py starts it with ``ip netns exec NS python mdns_peer.py``. It reads one
JSON request a line on stdin and writes one JSON reply a line on stdout, with "ok" and,
when not ok, "error". Requests, by "op":

- advertise: name, id, port, interfaces, watch_s, blocking (use the blocking API from a
  worker thread) -> name (as won), addresses
- update: name (as won), running, test -> nothing more
- close: name (as won) -> nothing more
- advertising: name (as won), addresses, timeout_s -> nothing more, once that
  advertiser announces exactly those addresses (it polls the host for changes)
- browse: interfaces -> nothing more (starts this peer's one RigBrowser)
- wait: present (list of partial RigAd dicts; "addresses" compared as a set), absent
  (names), timeout_s -> rigs
- fresh_wait: interfaces, present, absent, timeout_s -> rigs, as wait but from a new
  RigBrowser with an empty cache, closed after
- discover: interfaces, timeout_s -> rigs
- logs -> records: [level name, message] of taprig.daemon.advertise, in order

End of input closes everything and exits.
"""

from __future__ import annotations

import asyncio
import dataclasses
import json
import logging
import sys
from typing import Any

from taprig.client.discover import RigAd, RigBrowser, discover
from taprig.daemon.advertise import Advertiser

Request = dict[str, Any]


class _Records(logging.Handler):
    def __init__(self) -> None:
        super().__init__(logging.DEBUG)
        self.records: list[list[str]] = []

    def emit(self, record: logging.LogRecord) -> None:
        self.records.append([record.levelname, record.getMessage()])


def _as_json(rigs: list[RigAd]) -> list[dict[str, Any]]:
    return [dataclasses.asdict(r) for r in rigs]


def _matches(rig: dict[str, Any], want: dict[str, Any]) -> bool:
    for key, value in want.items():
        if key == "addresses":
            if set(rig["addresses"]) != set(value):
                return False
        elif rig[key] != value:
            return False
    return True


class Peer:
    def __init__(self, records: _Records) -> None:
        self.records = records
        self.advertisers: dict[str, tuple[Advertiser, bool]] = {}
        self.browser: RigBrowser | None = None

    async def handle(self, req: Request) -> dict[str, Any]:
        op = req["op"]
        if op == "advertise":
            ad = Advertiser(
                req["name"],
                req["id"],
                req["port"],
                interfaces=req["interfaces"],
                watch_interval_s=req.get("watch_s", 5.0),
            )
            blocking = bool(req.get("blocking"))
            if blocking:
                name = await asyncio.to_thread(ad.start)
            else:
                name = await ad.async_start()
            self.advertisers[name] = (ad, blocking)
            return {"name": name, "addresses": list(ad.addresses)}
        if op == "update":
            ad, blocking = self.advertisers[req["name"]]
            if blocking:
                await asyncio.to_thread(ad.update, running=req["running"], test=req["test"])
            else:
                await ad.async_update(running=req["running"], test=req["test"])
            return {}
        if op == "close":
            ad, blocking = self.advertisers.pop(req["name"])
            await (asyncio.to_thread(ad.close) if blocking else ad.async_close())
            return {}
        if op == "advertising":
            ad, _ = self.advertisers[req["name"]]
            loop = asyncio.get_running_loop()
            deadline = loop.time() + req["timeout_s"]
            while set(ad.addresses) != set(req["addresses"]):
                if loop.time() > deadline:
                    raise TimeoutError(f"still advertising {ad.addresses}")
                await asyncio.sleep(0.02)  # poll period, bounded by the deadline above
            return {}
        if op == "browse":
            self.browser = RigBrowser(req["interfaces"])
            await self.browser.async_start()
            return {}
        if op in ("wait", "fresh_wait"):
            present: list[dict[str, Any]] = req.get("present", [])
            absent: set[str] = set(req.get("absent", []))

            def holds(rigs: list[RigAd]) -> bool:
                seen = _as_json(rigs)
                return all(any(_matches(r, w) for r in seen) for w in present) and not any(
                    r["name"] in absent for r in seen
                )

            if op == "wait":
                assert self.browser is not None, "browse first"
                rigs = await self.browser.async_wait(holds, req["timeout_s"])
            else:
                fresh = RigBrowser(req["interfaces"])
                await fresh.async_start()
                try:
                    rigs = await fresh.async_wait(holds, req["timeout_s"])
                finally:
                    await fresh.async_close()
            return {"rigs": _as_json(rigs)}
        if op == "discover":
            # The blocking function, from a worker thread, as a command line calls it.
            rigs = await asyncio.to_thread(discover, req["timeout_s"], req["interfaces"])
            return {"rigs": _as_json(rigs)}
        if op == "logs":
            return {"records": self.records.records}
        raise ValueError(f"unknown op {op!r}")

    async def close(self) -> None:
        for ad, blocking in self.advertisers.values():
            await (asyncio.to_thread(ad.close) if blocking else ad.async_close())
        if self.browser is not None:
            await self.browser.async_close()


async def main() -> None:
    records = _Records()
    adv_log = logging.getLogger("taprig.daemon.advertise")
    adv_log.setLevel(logging.DEBUG)
    adv_log.addHandler(records)
    logging.basicConfig(level=logging.WARNING, stream=sys.stderr)  # this helper's own output
    peer = Peer(records)
    try:
        while line := await asyncio.to_thread(sys.stdin.readline):
            try:
                reply = {"ok": True, **await peer.handle(json.loads(line))}
            except Exception as exc:
                reply = {"ok": False, "error": f"{type(exc).__name__}: {exc}"}
            sys.stdout.write(json.dumps(reply) + "\n")
            sys.stdout.flush()
    finally:
        await peer.close()


if __name__ == "__main__":
    asyncio.run(main())
