"""The phone page: the static files in daemon/web/, served by the rig itself.

No build step and nothing from outside the rig: a handful of files read once at start-up
and answered from memory. The page lives at ``/`` and at ``/pair`` (where `taprigd pair`
points, with the token in the URL fragment, which a browser never sends); its scripts and
style under ``/web/``. None of these need the token; every /v1 call the page makes does.

Each answer carries its content type from the table below (never guessed from the
platform's MIME database), an ETag so a phone revalidates cheaply, and a Content Security
Policy that lets the page load and connect to nothing but this rig.
"""

from __future__ import annotations

import hashlib
from collections.abc import Awaitable, Callable
from dataclasses import dataclass
from importlib import resources
from typing import Final

from aiohttp import web

PAGE: Final = "index.html"
PAGE_PATHS: Final = ("/", "/pair")
STATIC_PREFIX: Final = "/web/"
FILES: Final[dict[str, str]] = {
    PAGE: "text/html; charset=utf-8",
    "phone.css": "text/css; charset=utf-8",
    "phone.js": "text/javascript; charset=utf-8",
    "link.js": "text/javascript; charset=utf-8",
    "plot.js": "text/javascript; charset=utf-8",
    "grid.js": "text/javascript; charset=utf-8",
    "maker.js": "text/javascript; charset=utf-8",
    "icon.svg": "image/svg+xml",
}
# Scripts, styles and connections only from the rig; no inline script; no framing.
POLICY: Final = (
    "default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self' data:; "
    "connect-src 'self'; manifest-src 'self'; base-uri 'none'; form-action 'none'; "
    "frame-ancestors 'none'"
)
HEADERS: Final[dict[str, str]] = {
    # Revalidate every time (a 304 is a few hundred bytes), so a phone never runs a page
    # older than the rig it talks to.
    "Cache-Control": "no-cache",
    "Content-Security-Policy": POLICY,
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "no-referrer",
}


@dataclass(frozen=True, slots=True)
class StaticFile:
    body: bytes
    content_type: str
    etag: str  # quoted, as sent (RFC 9110 §8.8.3)


def load() -> dict[str, StaticFile]:
    """Every file of `FILES` from the installed package; blocking, call once at start-up."""
    folder = resources.files("taprig.daemon").joinpath("web")
    out: dict[str, StaticFile] = {}
    for name, media in FILES.items():
        body = folder.joinpath(name).read_bytes()
        out[name] = StaticFile(body, media, f'"{hashlib.sha256(body).hexdigest()[:32]}"')
    return out


def add_routes(app: web.Application, files: dict[str, StaticFile]) -> None:
    """The page at `PAGE_PATHS` and every file at ``/web/<name>``, GET and HEAD."""
    for path in PAGE_PATHS:
        app.router.add_get(path, _handler(files[PAGE]))
    for name, item in files.items():
        app.router.add_get(STATIC_PREFIX + name, _handler(item))


def _handler(item: StaticFile) -> Callable[[web.Request], Awaitable[web.StreamResponse]]:
    async def handler(request: web.Request) -> web.StreamResponse:
        headers = {**HEADERS, "ETag": item.etag}
        if item.etag in _tags(request.headers.get("If-None-Match", "")):
            return web.Response(status=304, headers=headers)
        headers["Content-Type"] = item.content_type
        return web.Response(body=item.body, headers=headers)

    return handler


def _tags(header: str) -> set[str]:
    """The entity tags of an If-None-Match value (weak ones compare as strong, §13.1.2)."""
    return {t.strip().removeprefix("W/") for t in header.split(",") if t.strip()}
