"""Readiness, status and watchdog messages to the service manager (systemd's notify protocol).

The protocol is one datagram of ``KEY=value`` lines to the AF_UNIX socket named by
$NOTIFY_SOCKET (a name starting with ``@`` is in the abstract namespace). Written here in a
few lines rather than taken from a library: the daemon needs READY=1, STATUS=, WATCHDOG=1
and STOPPING=1, nothing else. Without $NOTIFY_SOCKET every call does nothing, so the
daemon runs the same by hand, under a test, or under systemd with Type=notify.
"""

from __future__ import annotations

import logging
import os
import socket
from collections.abc import Mapping

log = logging.getLogger(__name__)


class Notifier:
    """Sends notify messages; idle (every method a no-op) when no socket is named.

    environ: the environment to read (default os.environ), so tests pass a dict.
    """

    def __init__(self, environ: Mapping[str, str] | None = None) -> None:
        env = os.environ if environ is None else environ
        name = env.get("NOTIFY_SOCKET", "")
        self._address = "\0" + name[1:] if name.startswith("@") else name
        self._sock: socket.socket | None = None  # opened on the first send
        self.watchdog_s = _watchdog_period(env)
        """Seconds between WATCHDOG=1 pings (half of $WATCHDOG_USEC), or None: no watchdog."""
        self._status = ""
        self._warned = False

    @property
    def active(self) -> bool:
        return bool(self._address)

    def send(self, *lines: str) -> None:
        """Send `lines` as one message; a failure is logged once and never raised."""
        if not self._address:
            return
        try:
            if self._sock is None:
                self._sock = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM | socket.SOCK_CLOEXEC)
            self._sock.sendto("\n".join(lines).encode("utf-8"), self._address)
        except OSError as exc:
            # The manager went away or the socket is wrong: the daemon itself must go on.
            if not self._warned:
                log.warning("cannot notify the service manager at %s: %s", self._address, exc)
                self._warned = True

    def ready(self, status: str) -> None:
        self._status = status
        self.send("READY=1", f"STATUS={status}")

    def status(self, status: str) -> None:
        """Send STATUS= only when it changed."""
        if status != self._status:
            self._status = status
            self.send(f"STATUS={status}")

    def watchdog(self) -> None:
        self.send("WATCHDOG=1")

    def stopping(self) -> None:
        self.send("STOPPING=1", "STATUS=stopping")

    def close(self) -> None:
        if self._sock is not None:
            self._sock.close()
            self._sock = None


def _watchdog_period(env: Mapping[str, str]) -> float | None:
    """Half the watchdog timeout, as systemd advises; None if no watchdog is asked of us."""
    pid = env.get("WATCHDOG_PID")
    if pid and pid != str(os.getpid()):
        return None  # the watchdog is meant for another process (e.g. a wrapper)
    try:
        usec = int(env.get("WATCHDOG_USEC", "0"))
    except ValueError:
        return None
    return usec / 2e6 if usec > 0 else None
