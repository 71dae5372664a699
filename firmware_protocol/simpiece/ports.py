"""Where the simulated test piece's bytes go: a pseudo-terminal or a TCP socket.

Both are non-blocking and owned by the instrument's thread. A pty stands in
for a USB serial device (pyserial opens its tty path, or a stable symlink to
it, like any /dev/ttyACM0); TCP stands in for a Wi-Fi board
(`socket://127.0.0.1:PORT`). "Unplug" closes the device end; "replug" makes
a new one reachable at the same name.
"""

from __future__ import annotations

import contextlib
import errno
import os
import socket
import termios
import tty
from pathlib import Path
from typing import Protocol


class Port(Protocol):
    """The device end of a link, as the instrument thread sees it."""

    url: str

    def fileno(self) -> int | None:
        """A descriptor to wait on for readability (None while nothing is connected)."""

    def accept_pending(self) -> bool:
        """Take a waiting connection, if this kind of port has them; True if connected now."""

    def read(self) -> bytes:
        """Bytes the host sent (b"" if none)."""

    def write(self, data: bytes | memoryview) -> int:
        """Write what fits without blocking; the count written (0 when the host is not reading)."""

    @property
    def connected(self) -> bool: ...

    def unplug(self) -> None: ...

    def replug(self) -> None: ...

    def close(self) -> None: ...


class PtyPort:
    """A pseudo-terminal; the host opens `url` (the tty path, or `link` if given)."""

    def __init__(self, link: str | os.PathLike[str] | None = None) -> None:
        self._link = Path(link) if link is not None else None
        self._master: int | None = None
        self._slave: int | None = None
        self.tty_path = ""
        self.url = ""
        self.replug()

    def replug(self) -> None:
        if self._master is not None:
            return
        master, slave = os.openpty()
        # Raw at once: the line discipline must not echo or translate a single byte
        # before the host configures the port itself.
        tty.setraw(slave, termios.TCSANOW)
        os.set_blocking(master, False)
        self._master, self._slave = master, slave
        self.tty_path = os.ttyname(slave)
        if self._link is not None:
            tmp = self._link.with_name(self._link.name + ".new")
            with contextlib.suppress(FileNotFoundError):
                tmp.unlink()
            tmp.symlink_to(self.tty_path)
            tmp.replace(self._link)
            self.url = str(self._link)
        else:
            self.url = self.tty_path

    def fileno(self) -> int | None:
        return self._master

    def accept_pending(self) -> bool:
        return self._master is not None

    @property
    def connected(self) -> bool:
        return self._master is not None

    def read(self) -> bytes:
        if self._master is None:
            return b""
        try:
            return os.read(self._master, 65536)
        except BlockingIOError:
            return b""
        except OSError as exc:
            if exc.errno == errno.EIO:  # no host has the tty open: nothing to read
                return b""
            raise

    def write(self, data: bytes | memoryview) -> int:
        if self._master is None:
            return 0
        try:
            return os.write(self._master, data)
        except BlockingIOError:
            return 0

    def unplug(self) -> None:
        for fd in (self._master, self._slave):
            if fd is not None:
                os.close(fd)
        self._master = self._slave = None
        if self._link is not None:
            with contextlib.suppress(FileNotFoundError):
                self._link.unlink()

    def close(self) -> None:
        self.unplug()


class TcpPort:
    """A listening TCP socket on loopback; one host connection at a time."""

    def __init__(self, host: str = "127.0.0.1", port: int = 0) -> None:
        self._listener: socket.socket | None = None
        self.host, self.port = host, port
        self._conn: socket.socket | None = None
        self.replug()
        self.url = f"socket://{self.host}:{self.port}"

    def fileno(self) -> int | None:
        if self._conn is not None:
            return self._conn.fileno()
        return self._listener.fileno() if self._listener is not None else None

    def accept_pending(self) -> bool:
        if self._conn is None and self._listener is not None:
            try:
                conn, _addr = self._listener.accept()
            except BlockingIOError:
                return False
            conn.setblocking(False)
            conn.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
            self._conn = conn
        return self._conn is not None

    @property
    def connected(self) -> bool:
        return self._conn is not None

    def read(self) -> bytes:
        if self._conn is None:
            return b""
        try:
            data = self._conn.recv(65536)
        except BlockingIOError:
            return b""
        except OSError:
            data = b""
        if not data:  # the host went away
            self._drop()
        return data

    def write(self, data: bytes | memoryview) -> int:
        if self._conn is None:
            return 0
        try:
            return self._conn.send(data)
        except BlockingIOError:
            return 0
        except OSError:
            self._drop()
            return 0

    def _drop(self) -> None:
        if self._conn is not None:
            self._conn.close()
            self._conn = None

    def unplug(self) -> None:
        """Drop the host and stop listening: connecting is refused until `replug`."""
        self._drop()
        if self._listener is not None:
            self._listener.close()
            self._listener = None

    def replug(self) -> None:
        if self._listener is None:
            self._listener = socket.create_server((self.host, self.port))
            self._listener.setblocking(False)
            self.host, self.port = self._listener.getsockname()[:2]

    def close(self) -> None:
        self.unplug()
