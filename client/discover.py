"""Find rigs on the LAN: browse mDNS/DNS-SD for rigs and read what each one advertises.

`discover` listens for a while and returns what it found; `RigBrowser` keeps a live view
for a program that stays up. The record layout comes from `taprig.schema`, the contract
shared with the daemon; nothing here imports daemon code.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Final

from zeroconf import InterfaceChoice, ServiceInfo, ServiceStateChange, Zeroconf
from zeroconf.asyncio import AsyncServiceBrowser, AsyncServiceInfo, AsyncZeroconf

from taprig.schema import SERVICE_TYPE, TXT_API, TXT_ID, TXT_RUN, TXT_TEST

log = logging.getLogger(__name__)

# Records can expire without an event (a cache flush drops a stale address after 1 s,
# RFC 6762 §10.2), so a waiter re-reads the cache at least this often.
RECHECK_S: Final = 0.25
RESOLVE_TIMEOUT_S: Final = 3.0


@dataclass(frozen=True, slots=True)
class RigAd:
    """One rig as it advertises itself.

    name: instance name (``name-2`` etc. after a clash on the LAN); addresses: IPv4 then
    IPv6, as text; port: TCP port of the rig's HTTP service; api: its API version, None if
    missing or not a number; rig_id: its stable id ("" if missing); running: a test is
    running; test: the current test's name (possibly cut short), or None.
    """

    name: str
    addresses: tuple[str, ...]
    port: int
    api: int | None
    rig_id: str
    running: bool
    test: str | None


def rig_ad(info: ServiceInfo) -> RigAd:
    """The RigAd of a resolved service (TXT keys compared ignoring case, RFC 6763 §6.4)."""
    props = {k.lower(): v for k, v in info.decoded_properties.items()}
    api = props.get(TXT_API)
    suffix = "." + SERVICE_TYPE
    name = info.name[: -len(suffix)] if info.name.lower().endswith(suffix) else info.name
    return RigAd(
        name=name,
        addresses=tuple(info.parsed_scoped_addresses()),
        port=info.port or 0,
        api=int(api) if api is not None and api.isascii() and api.isdecimal() else None,
        rig_id=props.get(TXT_ID) or "",
        running=props.get(TXT_RUN) == "1",
        test=props.get(TXT_TEST) or None,
    )


class RigBrowser:
    """A live view of the rigs on the LAN. Every method runs in the event loop only.

    interfaces: `InterfaceChoice.All` or a list of interface addresses to browse on.
    """

    def __init__(self, interfaces: Sequence[str] | InterfaceChoice = InterfaceChoice.All) -> None:
        self._interfaces = (
            interfaces if isinstance(interfaces, InterfaceChoice) else list(interfaces)
        )
        self._aiozc: AsyncZeroconf | None = None
        self._browser: AsyncServiceBrowser | None = None
        self._rigs: dict[str, RigAd] = {}  # by full service name
        self._resolving: set[asyncio.Task[None]] = set()
        self._changed = asyncio.Event()
        self._closed = False

    async def async_start(self) -> None:
        """Open python-zeroconf on the running loop and start browsing."""
        if self._aiozc is not None or self._closed:
            raise RuntimeError("browser already started or closed")
        self._aiozc = AsyncZeroconf(interfaces=self._interfaces)
        self._browser = AsyncServiceBrowser(
            self._aiozc.zeroconf, SERVICE_TYPE, handlers=[self._on_change]
        )

    def rigs(self) -> list[RigAd]:
        """The rigs known now, by name; each re-read from the record cache when complete."""
        assert self._aiozc is not None, "browser not started"
        out = []
        for full_name, last in self._rigs.items():
            info = AsyncServiceInfo(SERVICE_TYPE, full_name)
            out.append(rig_ad(info) if info.load_from_cache(self._aiozc.zeroconf) else last)
        return sorted(out, key=lambda ad: ad.name)

    async def async_wait(
        self, until: Callable[[list[RigAd]], bool], timeout_s: float
    ) -> list[RigAd]:
        """Wait until `until(rigs)` holds and return those rigs; TimeoutError after timeout_s."""
        loop = asyncio.get_running_loop()
        deadline = loop.time() + timeout_s
        while True:
            self._changed.clear()  # before the snapshot, so no change is missed
            rigs = self.rigs()
            if until(rigs):
                return rigs
            left = deadline - loop.time()
            if left <= 0:
                raise TimeoutError(f"rigs still {rigs} after {timeout_s} s")
            with contextlib.suppress(TimeoutError):
                await asyncio.wait_for(self._changed.wait(), min(left, RECHECK_S))

    async def async_close(self) -> None:
        """Stop browsing and close python-zeroconf; idempotent."""
        if self._closed:
            return
        self._closed = True
        for task in self._resolving:
            task.cancel()
        await asyncio.gather(*self._resolving, return_exceptions=True)
        if self._browser is not None:
            await self._browser.async_cancel()
        if self._aiozc is not None:
            await self._aiozc.async_close()

    def _on_change(
        self,
        zeroconf: Zeroconf,
        service_type: str,
        name: str,
        state_change: ServiceStateChange,
    ) -> None:
        # python-zeroconf calls handlers by these keyword names, in the event loop.
        if state_change is ServiceStateChange.Removed:
            if self._rigs.pop(name, None) is not None:
                log.debug("rig %s withdrew", name)
            self._changed.set()
            return
        task = asyncio.get_running_loop().create_task(self._async_resolve(name))
        self._resolving.add(task)
        task.add_done_callback(self._resolving.discard)

    async def _async_resolve(self, full_name: str) -> None:
        assert self._aiozc is not None
        info = AsyncServiceInfo(SERVICE_TYPE, full_name)
        if await info.async_request(self._aiozc.zeroconf, RESOLVE_TIMEOUT_S * 1000):
            self._rigs[full_name] = rig_ad(info)
            self._changed.set()
        else:
            log.debug("rig %s did not answer within %s s", full_name, RESOLVE_TIMEOUT_S)


async def async_discover(
    timeout_s: float, interfaces: Sequence[str] | InterfaceChoice = InterfaceChoice.All
) -> list[RigAd]:
    """The rigs heard within timeout_s seconds, by name. Event loop only."""
    if not (math.isfinite(timeout_s) and timeout_s > 0):
        raise ValueError(f"timeout_s {timeout_s} must be a positive number of seconds")
    browser = RigBrowser(interfaces)
    await browser.async_start()
    try:
        await asyncio.sleep(timeout_s)  # the listening window itself, not a wait on a condition
        return browser.rigs()
    finally:
        await browser.async_close()


def discover(
    timeout_s: float, interfaces: Sequence[str] | InterfaceChoice = InterfaceChoice.All
) -> list[RigAd]:
    """As `async_discover`, blocking; for a thread with no running event loop."""
    return asyncio.run(async_discover(timeout_s, interfaces))
