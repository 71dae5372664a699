"""Pairing a workstation with the rig: the pairing URL, its QR code for the terminal, and
what ``taprigd pair`` prints. The token itself is daemon/auth.py's.
"""

from __future__ import annotations

import ipaddress
import os
import re
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Final

import numpy as np
import segno

from . import identity
from .auth import Auth, replace_token_file

QUIET_ZONE: Final = 4
"""Light modules around a QR code (ISO/IEC 18004: a quiet zone 4 modules wide)."""
# RFC 1123 §2.1 host names: dot-separated labels of letters, digits and inner hyphens.
_HOSTNAME_RE: Final = re.compile(
    r"(?=.{1,253}$)[A-Za-z0-9](?:[A-Za-z0-9-]{0,61}[A-Za-z0-9])?"
    r"(?:\.[A-Za-z0-9](?:[A-Za-z0-9-]{0,61}[A-Za-z0-9])?)*\.?"
)


def pairing_url(token: str, host: str, port: int) -> str:
    """``http://{host}:{port}/pair#token=<token>``, for a workstation to pair with.

    The token is in the fragment (after ``#``): an HTTP client keeps the fragment to
    itself and never sends it in a request (RFC 3986 §3.5, RFC 9110 §7.1), so even a
    browser opening the URL leaves no token in this rig's or a proxy's access logs.
    An IPv6 address is put in brackets (RFC 3986 §3.2.2).
    """
    if isinstance(port, bool) or not isinstance(port, int) or not 1 <= port <= 65535:
        raise ValueError(f"port must be 1..65535, got {port!r}")
    return f"http://{_url_host(host)}:{port}/pair#token={token}"


def qr_text(url: str, *, invert: bool = False) -> str:
    """`url` as a QR code (error correction level M) drawn with Unicode half blocks.

    One text row holds two module rows: "▀" upper, "▄" lower, "█" both, " " neither, with a
    quiet zone of `QUIET_ZONE` modules all round. By default the *light* modules are drawn,
    for light text on a dark terminal (a console or ssh session on the board); invert=True
    draws the dark modules, for dark text on a light background.
    """
    qr = segno.make_qr(url, error="m", boost_error=False)
    dark = np.array(list(qr.matrix_iter(border=QUIET_ZONE)), dtype=bool)
    ink = dark if invert else ~dark
    if ink.shape[0] % 2:  # pad with one more light row so the rows pair up
        ink = np.vstack([ink, np.full((1, ink.shape[1]), not invert)])
    glyphs = np.array([" ", "▄", "▀", "█"])
    codes = 2 * ink[0::2].astype(np.intp) + ink[1::2]
    return "\n".join("".join(row) for row in glyphs[codes])


def _url_host(host: str) -> str:
    """`host` as the host part of a URL: a DNS name, an IPv4 address or a bracketed IPv6."""
    bare = host[1:-1] if host.startswith("[") and host.endswith("]") else host
    try:
        addr = ipaddress.ip_address(bare)
    except ValueError:
        if bare is not host or not _HOSTNAME_RE.fullmatch(host):
            raise ValueError(f"{host!r} is not a host name or an IP address") from None
        return host
    if addr.is_unspecified:
        raise ValueError(
            f"{host} means 'every address' to a server; give one a workstation can reach"
        )
    # RFC 6874: the "%" before an IPv6 zone is written "%25" in a URL.
    return f"[{str(addr).replace('%', '%25')}]" if addr.version == 6 else str(addr)


DEFAULT_PORT: Final = 8470  # the service's port when the configuration leaves it to the OS


@dataclass(frozen=True, slots=True)
class Reach:
    """Where a phone or workstation reaches this rig's service, and anything to tell about it."""

    host: str
    port: int
    notes: tuple[str, ...] = ()


def reach(
    state_dir: Path, bind: str, port: int, lan_address: Callable[[], str], host: str | None = None
) -> Reach:
    """The address `taprigd pair` prints: where the running daemon really listens.

    The run file (daemon/identity.py) of a live daemon gives its bind address and port; without
    one, the configuration's `bind` and `port` (0: `DEFAULT_PORT`) are all there is, and the
    notes say so. A daemon bound to loopback is reached at loopback (only from this machine);
    one bound to every address (0.0.0.0, ::) at `lan_address()`. `host` overrides the host.
    """
    notes: list[str] = []
    record = identity.read_run_file(state_dir)
    if record is not None and _alive(record.get("pid")):
        bind, port = str(record.get("bind", bind)), int(record.get("port", port))
    else:
        port = port or DEFAULT_PORT
        notes.append(
            f"taprigd is not running with this state folder ({state_dir}): the "
            f"address uses the configured port {port}; start taprigd before pairing."
        )
    if host is not None:
        return Reach(host, port, tuple(notes))
    if bind in ("", "0.0.0.0", "::"):
        return Reach(lan_address(), port, tuple(notes))
    if bind == "localhost" or _is_loopback(bind):
        notes.append(
            "taprigd listens on loopback only: only this machine can reach it. For "
            "a phone, set service.bind to a LAN address or 0.0.0.0 and restart it."
        )
        return Reach("127.0.0.1" if bind == "localhost" else bind, port, tuple(notes))
    return Reach(bind, port, tuple(notes))


def _is_loopback(host: str) -> bool:
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False


def _alive(pid: object) -> bool:
    """Whether process `pid` runs (a stale run file names one that does not)."""
    if not isinstance(pid, int) or pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True  # it runs, as another user (the service's own)
    return True


def pair_command_output(
    state_dir: Path, host: str, port: int, rotate: bool, notes: tuple[str, ...] = ()
) -> str:
    """What ``taprigd pair`` prints: the pairing URL as a QR code and as text.

    rotate: first replace the token (without reading the old file, so this also mends an
    unsafe one); workstations paired before must pair again. AuthError / ValueError as
    `Auth` and `pairing_url` raise them.
    """
    if rotate:
        replace_token_file(state_dir)
    url = pairing_url(Auth(Path(state_dir)).token, host, port)
    lines = []
    if rotate:
        lines += [
            "Made a new access token. Workstations paired before must pair again;",
            "a running taprigd refuses the old token from its next request on.",
            "",
        ]
    lines += [
        "Pair a workstation with this rig: scan the code, or give it this address:",
        "",
        qr_text(url),
        "",
        f"  {url}",
        "",
        "The address holds the rig's access token: whoever has it can read everything",
        "this rig stores. Keep it private; `taprigd pair --rotate` makes a new token and",
        "shuts out every workstation paired before.",
        *(["", *notes] if notes else []),
    ]
    return "\n".join(lines) + "\n"
