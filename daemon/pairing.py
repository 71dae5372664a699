"""Pairing a workstation with the rig: the pairing URL, its QR code for the terminal, and
what ``taprigd pair`` prints. The token itself is daemon/auth.py's.
"""

from __future__ import annotations

import ipaddress
import re
from pathlib import Path
from typing import Final

import numpy as np
import segno

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


def pair_command_output(state_dir: Path, host: str, port: int, rotate: bool) -> str:
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
    ]
    return "\n".join(lines) + "\n"
