"""The phone page's files as the service serves them: no token needed, the right content
types (RFC 9239 for JavaScript, RFC 2318 for CSS, the SVG media type of the SVG 1.1
recommendation), revalidation by ETag (RFC 9110 §13.1.2), and nothing fetched from outside
the rig. The page itself is tested in a browser, in tests/web/.
"""

from __future__ import annotations

import re
from pathlib import Path

from taprig.daemon.auth import Auth
from taprig.daemon.lifespan import RunningRig
from taprig.daemon.page import FILES

from .test_service import auth, run, running, serving

__all__ = ["auth", "running"]  # fixtures, imported for pytest

WEB = Path(__file__).resolve().parents[2] / "daemon" / "web"
# Written here from the standards, not read from the module under test.
MEDIA = {
    ".html": "text/html; charset=utf-8",
    ".js": "text/javascript; charset=utf-8",
    ".css": "text/css; charset=utf-8",
    ".svg": "image/svg+xml",
}


def test_page_and_its_files_need_no_token_and_carry_their_types(
    running: RunningRig, auth: Auth
) -> None:
    async def main() -> None:
        async with serving(running, auth) as (_, api):
            http = api.http
            for path in ("/", "/pair"):
                async with http.get(path) as r:
                    assert r.status == 200, path
                    assert r.headers["Content-Type"] == MEDIA[".html"]
                    policy = r.headers["Content-Security-Policy"]
                    assert "default-src 'none'" in policy and "connect-src 'self'" in policy
                    assert r.headers["X-Content-Type-Options"] == "nosniff"
                    assert await r.read() == (WEB / "index.html").read_bytes()
            for name in FILES:
                async with http.get(f"/web/{name}") as r:
                    assert r.status == 200, name
                    assert r.headers["Content-Type"] == MEDIA[Path(name).suffix], name
                    assert r.headers["Cache-Control"] == "no-cache"
                    assert await r.read() == (WEB / name).read_bytes()
                    etag = r.headers["ETag"]
                async with http.get(f"/web/{name}", headers={"If-None-Match": etag}) as r:
                    assert r.status == 304 and await r.read() == b""
                async with http.get(f"/web/{name}", headers={"If-None-Match": '"other"'}) as r:
                    assert r.status == 200
            async with http.head("/pair") as r:
                assert r.status == 200
            for missing in ("/web/missing.js", "/web/", "/web/../service.py", "/pair/x"):
                async with http.get(missing) as r:
                    assert r.status == 404, missing
            # The page is public; what it does is not.
            async with http.get("/v1/state") as r:
                assert r.status == 401
            # What the page needs of the state: the accept policy and each channel's role.
            status, body = await api.get("/v1/state")
            assert status == 200 and body["accept"] == "auto"
            expected = sorted(running.config.channels, key=lambda c: c.index)
            assert body["channels"] == [{"label": c.label, "role": c.role.value} for c in expected]
            assert [c["role"] for c in body["channels"]].count("force") == 1
            async with http.post("/v1/session/arm", json={"request_id": "page-test-1"}) as r:
                assert r.status == 401

    run(main())


def test_every_file_is_listed_and_nothing_is_fetched_from_elsewhere() -> None:
    assert {p.name for p in WEB.iterdir()} == set(FILES)
    html = (WEB / "index.html").read_text(encoding="utf-8")
    for ref in re.findall(r'(?:src|href)="([^"]*)"', html):
        assert ref.startswith("/web/") and ref[5:] in FILES, ref
    for name in FILES:
        text = (WEB / name).read_text(encoding="utf-8")
        if name.endswith(".js"):
            for target in re.findall(r'\bfrom "([^"]+)"', text):
                assert target.startswith("./") and target[2:] in FILES, (name, target)
            for target in re.findall(r"fetch\(\s*([`\"'])(.)", text):
                assert target[1] == "/", (name, target)  # this rig's own paths only
            # The token goes in a header only: never in a query string built by the page.
            assert "?token" not in text and "token=${" not in text and "new EventSource" not in text
        if name.endswith(".css"):
            assert "url(" not in text and "@import" not in text
    # Small enough for a phone on a weak shop Wi-Fi to load in a moment.
    assert sum((WEB / n).stat().st_size for n in FILES) < 80_000
