"""The view's server without a browser: only its own files, a strict policy, clear 404s."""

from __future__ import annotations

import json
import urllib.error
import urllib.request

from taprig.client.view.geometry import from_grid
from taprig.client.view.server import FILES, ViewServer, ViewThread

from .conftest import Known


def get(url: str) -> tuple[int, dict[str, str], bytes]:
    try:
        with urllib.request.urlopen(url, timeout=10) as answer:
            return answer.status, dict(answer.headers), answer.read()
    except urllib.error.HTTPError as err:
        return err.code, dict(err.headers), err.read()


def test_files_data_and_errors(known: Known) -> None:
    server = ViewServer(known.data, known.modes, from_grid(known.data.grid))
    with ViewThread(server) as running:
        base = running.url
        status, headers, body = get(base)
        assert status == 200 and headers["Content-Type"].startswith("text/html")
        assert "default-src 'none'" in headers["Content-Security-Policy"]
        assert "connect-src 'self'" in headers["Content-Security-Policy"]
        for name in FILES:
            if name != "index.html":
                assert get(f"{base}web/{name}")[0] == 200
        assert get(f"{base}web/../server.py")[0] == 404
        assert get(f"{base}web/secret.txt")[0] == 404
        status, _, body = get(f"{base}data")
        assert status == 200 and json.loads(body)["test"]["name"] == known.data.test
        status, _, body = get(f"{base}data/point/30")
        assert status == 404 and b"no point row 30" in body
        status, _, body = get(f"{base}data/ods/x")
        assert status == 404
        status, _, body = get(f"{base}data/ods/{known.data.freq_hz.size}")
        assert status == 404 and b"no frequency line" in body
        assert json.loads(get(f"{base}data/ods/131")[2])["freq_hz"] == 65.5
