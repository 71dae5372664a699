"""Advertise a rig on the LAN by mDNS/DNS-SD, keep its TXT record current, withdraw it on close.

One `Advertiser` per rig; the record layout is declared in `taprig.schema`. The daemon's
asyncio service calls the ``async_`` methods inside its event loop (python-zeroconf's
convention: ``async_`` means "only in the event loop"). A command line calls `start`,
`update` and `close` from any thread outside an event loop: they run the same coroutines
on python-zeroconf's own loop thread and block until those finish.

While started, a watch task polls the host's interfaces every ``watch_interval_s``. When
their addresses change it lets python-zeroconf rebind (when serving on all interfaces) and
re-announces the rig's addresses. Each interface's first change is logged at WARNING and
later ones at DEBUG, so a flapping Wi-Fi link cannot flood the journal.
"""

from __future__ import annotations

import asyncio
import contextlib
import ipaddress
import logging
import re
import threading
from collections.abc import Coroutine, Mapping, Sequence
from typing import Any, Final, Literal, TypeVar

import ifaddr
from zeroconf import InterfaceChoice, ServiceInfo
from zeroconf.asyncio import AsyncZeroconf

from taprig.schema import SERVICE_TYPE

from .txt import rig_txt

log = logging.getLogger(__name__)

# RFC 6763 §4.1.1 allows 63 bytes; 4 are kept for the "-NNN" python-zeroconf appends on a clash.
NAME_MAX_BYTES: Final = 59
RIG_ID_RE: Final = re.compile(r"[0-9a-z-]{1,36}")  # also the host label taprig-<id>.local.
# Probing takes about 2 s per name tried (RFC 6762 §8.1; python-zeroconf waits 500 ms a probe).
START_TIMEOUT_S: Final = 30.0
CALL_TIMEOUT_S: Final = 10.0

Interfaces = Sequence[str] | InterfaceChoice
"""Where to serve mDNS: `InterfaceChoice.All` (IPv4) or a list of interface addresses."""

_T = TypeVar("_T")


def _ip_text(ip: ifaddr.IP) -> str:
    # ifaddr gives IPv6 as (address, flowinfo, scope_id).
    return ip.ip if isinstance(ip.ip, str) else ip.ip[0]


def interface_addresses(interfaces: Interfaces) -> dict[str, frozenset[str]]:
    """The host's addresses that mDNS serves now, by interface name.

    `InterfaceChoice`: every IPv4 address (python-zeroconf's default family). A list:
    those of its addresses present now. Interfaces left with none are left out.
    """
    wanted = None if isinstance(interfaces, InterfaceChoice) else set(interfaces)
    found: dict[str, frozenset[str]] = {}
    for adapter in ifaddr.get_adapters():
        ips = frozenset(
            _ip_text(ip)
            for ip in adapter.ips
            if (ip.is_IPv4 if wanted is None else _ip_text(ip) in wanted)
        )
        if ips:
            found[adapter.nice_name] = ips
    return found


def _sorted_ips(ips: set[str] | frozenset[str]) -> tuple[str, ...]:
    # IPv4 first; IPv4Address and IPv6Address do not compare with each other.
    return tuple(
        sorted(ips, key=lambda a: (ipaddress.ip_address(a).version, int(ipaddress.ip_address(a))))
    )


def _advertised(interfaces: Interfaces, snapshot: Mapping[str, frozenset[str]]) -> tuple[str, ...]:
    found = {a for ips in snapshot.values() for a in ips}
    if isinstance(interfaces, InterfaceChoice):
        # A workstation given 127.0.0.1 would talk to itself; loopback only when alone.
        outside = {a for a in found if not ipaddress.ip_address(a).is_loopback}
        found = outside or found
    return _sorted_ips(found)


def _canonical_ip(text: str, what: str) -> str:
    try:
        return str(ipaddress.ip_address(text))
    except ValueError:
        raise ValueError(f"{what} {text!r} is not an IP address") from None


class Advertiser:
    """Advertises one rig as an instance of `SERVICE_TYPE` with its port and TXT record.

    name: the rig's name, 1..59 bytes of UTF-8 without control characters; renamed
    ``name-2``, ``name-3``, ... if the LAN already has it (see `name` after start).
    rig_id: the rig's stable id, 1..36 of ``0-9 a-z -`` (daemon/identity.py makes one).
    port: TCP port of the rig's HTTP service.
    interfaces: `InterfaceChoice.All` or a list of interface addresses to serve mDNS on.
    addresses: addresses to advertise; by default those of the served interfaces (for
    All, loopback left out unless the host has nothing else), followed as they change.
    watch_interval_s: how often to poll the interfaces, in s; 0 turns the watch off.

    Every invalid argument raises ValueError naming it. `close` and `async_close` are
    idempotent; a closed advertiser cannot start again.
    """

    def __init__(
        self,
        name: str,
        rig_id: str,
        port: int,
        *,
        interfaces: Interfaces = InterfaceChoice.All,
        addresses: Sequence[str] | None = None,
        watch_interval_s: float = 5.0,
    ) -> None:
        size = len(name.encode())
        if not 1 <= size <= NAME_MAX_BYTES:
            raise ValueError(f"rig name {name!r} is {size} bytes; 1 to {NAME_MAX_BYTES} allowed")
        if any(ord(c) < 0x20 or ord(c) == 0x7F for c in name):
            raise ValueError(f"rig name {name!r} contains a control character (RFC 6763 §4.1.1)")
        if not RIG_ID_RE.fullmatch(rig_id):
            raise ValueError(f"rig id {rig_id!r}: 1 to 36 of 0-9, a-z and '-' allowed")
        if not 1 <= port <= 65535:
            raise ValueError(f"port {port} is not a TCP port (1..65535)")
        if not watch_interval_s >= 0:
            raise ValueError(f"watch_interval_s {watch_interval_s} must be >= 0 s")
        for what, given in (("interfaces", interfaces), ("addresses", addresses)):
            if isinstance(given, str):
                raise ValueError(f"{what} {given!r}: give a list of addresses, not one string")
            if given is not None and not isinstance(given, InterfaceChoice) and not given:
                raise ValueError(f"{what} is empty: give at least one address")
        self._interfaces: Interfaces = (
            interfaces
            if isinstance(interfaces, InterfaceChoice)
            # python-zeroconf wants a list, and compares addresses as text.
            else [_canonical_ip(a, "interface address") for a in interfaces]
        )
        self._fixed_addresses = (
            None
            if addresses is None
            else _sorted_ips({_canonical_ip(a, "address") for a in addresses})
        )
        self._rig_id = rig_id
        self._port = port
        self._watch_interval_s = watch_interval_s
        self._server = f"taprig-{rig_id}.local."
        self._full_name = f"{name}.{SERVICE_TYPE}"
        self._txt = rig_txt(rig_id, running=False, test=None)
        self._snapshot: dict[str, frozenset[str]] = {}
        self._addresses: tuple[str, ...] = ()
        self._aiozc: AsyncZeroconf | None = None
        self._info: ServiceInfo | None = None
        self._watch: asyncio.Task[None] | None = None
        self._mode: Literal["async", "sync"] | None = None
        self._closed = False
        self._warned: set[str] = set()
        self._lock = threading.Lock()  # serialises the blocking methods' callers

    @property
    def name(self) -> str:
        """The instance name: as asked before start, as won (maybe renamed) after."""
        return self._full_name[: -len(SERVICE_TYPE) - 1]

    @property
    def addresses(self) -> tuple[str, ...]:
        """The addresses advertised now (empty before start)."""
        return self._addresses

    # -- event loop API -----------------------------------------------------------------

    async def async_start(self, *, running: bool = False, test: str | None = None) -> str:
        """Probe for the name, register and announce; return the name won. Event loop only."""
        self._claim("async")
        # Created inside a running loop, python-zeroconf serves from that loop.
        aiozc = self._open_zeroconf()
        try:
            await self._async_register(running, test)
        except BaseException:
            self._closed = True
            await aiozc.async_close()
            raise
        return self.name

    async def async_update(self, *, running: bool, test: str | None = None) -> None:
        """Set the state the TXT record carries and re-announce it. Event loop only.

        running: whether a test is running; test: its name (cut to 64 bytes), or None.
        Returns once the announcements are sent (about 0.5 s); no-op if nothing changed.
        """
        self._check_open("async")
        await self._async_set_state(running, test)

    async def async_close(self) -> None:
        """Stop the watch, send goodbyes, then close python-zeroconf. Event loop only."""
        if self._closed:
            return
        if self._mode == "sync":
            raise RuntimeError("started with start: close with close")
        self._closed = True
        aiozc = self._aiozc
        if aiozc is None:
            return
        try:
            await self._async_withdraw()
        finally:
            await aiozc.async_close()

    # -- blocking API, for a command line ------------------------------------------------

    def start(self, *, running: bool = False, test: str | None = None) -> str:
        """As `async_start`, from a thread outside any event loop; blocks up to 30 s."""
        _refuse_inside_loop("start")
        with self._lock:
            self._claim("sync")
            # Created outside a loop, python-zeroconf runs its own loop thread.
            aiozc = self._open_zeroconf()
            try:
                self._run(self._async_register(running, test), START_TIMEOUT_S)
            except BaseException:
                self._closed = True
                aiozc.zeroconf.close()
                raise
            return self.name

    def update(self, *, running: bool, test: str | None = None) -> None:
        """As `async_update`, from a thread outside any event loop."""
        _refuse_inside_loop("update")
        with self._lock:
            self._check_open("sync")
            self._run(self._async_set_state(running, test), CALL_TIMEOUT_S)

    def close(self) -> None:
        """As `async_close`, from a thread outside any event loop; joins zeroconf's thread."""
        _refuse_inside_loop("close")
        with self._lock:
            if self._closed:
                return
            if self._mode == "async":
                raise RuntimeError("started with async_start: close with async_close")
            self._closed = True
            aiozc = self._aiozc
            if aiozc is None:
                return
            try:
                self._run(self._async_withdraw(), CALL_TIMEOUT_S)
            finally:
                # From this thread: it stops and joins the loop thread the withdraw ran on.
                aiozc.zeroconf.close()

    # -- internals ----------------------------------------------------------------------

    def _claim(self, mode: Literal["async", "sync"]) -> None:
        if self._closed:
            raise RuntimeError("advertiser is closed")
        if self._mode is not None:
            raise RuntimeError("advertiser already started")
        self._mode = mode

    def _open_zeroconf(self) -> AsyncZeroconf:
        try:
            self._aiozc = AsyncZeroconf(interfaces=self._interfaces)
        except BaseException:
            self._closed = True  # nothing to release: the sockets never opened
            raise
        return self._aiozc

    def _check_open(self, mode: Literal["async", "sync"]) -> None:
        if self._closed:
            raise RuntimeError("advertiser is closed")
        if self._mode is None or self._info is None:
            raise RuntimeError("advertiser not started")
        if self._mode != mode:
            other = "async_" if self._mode == "async" else "blocking "
            raise RuntimeError(f"advertiser was started with the {other}API; use that one")

    def _run(self, coro: Coroutine[Any, Any, _T], timeout_s: float) -> _T:
        assert self._aiozc is not None
        loop = self._aiozc.zeroconf.loop
        assert loop is not None
        future = asyncio.run_coroutine_threadsafe(coro, loop)
        try:
            return future.result(timeout_s)
        except TimeoutError:
            future.cancel()
            raise

    def _service_info(self) -> ServiceInfo:
        return ServiceInfo(
            SERVICE_TYPE,
            self._full_name,
            port=self._port,
            properties=self._txt,
            server=self._server,
            addresses=list(self._addresses),
        )

    async def _async_register(self, running: bool, test: str | None) -> None:
        assert self._aiozc is not None
        self._txt = rig_txt(self._rig_id, running=running, test=test)
        self._snapshot = interface_addresses(self._interfaces)
        self._addresses = self._addresses_for(self._snapshot)
        info = self._service_info()
        asked = self.name
        # allow_name_change: on a clash python-zeroconf renames info and probes again.
        announced = await self._aiozc.async_register_service(info, allow_name_change=True)
        await announced
        self._full_name = info.name
        self._info = info
        if self.name != asked:
            log.warning("rig name %r is taken on the LAN; advertising as %r", asked, self.name)
        log.info("advertising %r on port %d at %s", self.name, self._port, self._addresses)
        if self._watch_interval_s > 0:
            self._watch = asyncio.get_running_loop().create_task(
                self._async_watch(), name=f"taprig-advertise-watch-{self._rig_id}"
            )

    def _addresses_for(self, snapshot: Mapping[str, frozenset[str]]) -> tuple[str, ...]:
        if self._fixed_addresses is not None:
            return self._fixed_addresses
        return _advertised(self._interfaces, snapshot)

    async def _async_set_state(self, running: bool, test: str | None) -> None:
        txt = rig_txt(self._rig_id, running=running, test=test)
        if txt != self._txt:
            self._txt = txt
            await self._async_republish()

    async def _async_republish(self) -> None:
        assert self._aiozc is not None
        # A fresh ServiceInfo under the won name: python-zeroconf replaces it in its
        # registry and announces its records.
        self._info = self._service_info()
        announced = await self._aiozc.async_update_service(self._info)
        await announced

    async def _async_withdraw(self) -> None:
        if self._watch is not None:
            self._watch.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await self._watch
            self._watch = None
        if self._info is not None and self._aiozc is not None:
            goodbyes = await self._aiozc.async_unregister_service(self._info)
            await goodbyes
            self._info = None
            log.info("withdrew %r", self.name)

    async def _async_watch(self) -> None:
        while True:
            # A poll period, not a wait on a condition: the kernel offers no portable event.
            await asyncio.sleep(self._watch_interval_s)
            try:
                await self._async_follow_interfaces()
            except Exception as exc:  # the watch must outlive one bad poll
                self._log_once("watch", "interface watch failed: %s", exc)

    async def _async_follow_interfaces(self) -> None:
        assert self._aiozc is not None
        # getifaddrs is a short netlink round trip; not worth a thread.
        now = interface_addresses(self._interfaces)
        before = self._snapshot
        changed = sorted(n for n in before.keys() | now.keys() if before.get(n) != now.get(n))
        if not changed:
            return
        self._snapshot = now
        for iface in changed:
            self._log_once(
                iface,
                "interface %s addresses changed: %s -> %s",
                iface,
                ", ".join(_sorted_ips(before.get(iface, frozenset()))) or "none",
                ", ".join(_sorted_ips(now.get(iface, frozenset()))) or "none",
            )
        if isinstance(self._interfaces, InterfaceChoice):
            # Bind to interfaces that appeared, drop those gone; zeroconf re-announces on new ones.
            await self._aiozc.async_update_interfaces()
        addresses = self._addresses_for(now)
        if addresses != self._addresses:
            self._addresses = addresses
            await self._async_republish()

    def _log_once(self, topic: str, message: str, *args: object) -> None:
        first = topic not in self._warned
        self._warned.add(topic)
        if first:
            log.warning(message + " (repeats are logged at DEBUG)", *args)
        else:
            log.debug(message, *args)


def _refuse_inside_loop(method: str) -> None:
    try:
        asyncio.get_running_loop()
    except RuntimeError:
        return
    raise RuntimeError(f"Advertiser.{method} blocks; inside an event loop use async_{method}")
