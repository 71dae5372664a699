"""Headless Chromium on a desktop-sized window for the view page, and what it saw.

Debian's chromium and chromedriver, as for the phone page (tests/web/harness.py); the
performance log gives every request the page made, so a test can show none left loopback.
"""

from __future__ import annotations

import contextlib
import json
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from selenium import webdriver
from selenium.webdriver.remote.webdriver import WebDriver

from tests.web.harness import chromium, wait

__all__ = ["desktop", "requested_urls", "severe_logs", "wait"]


@contextlib.contextmanager
def desktop(tmp: Path, width: int = 1400, height: int = 1000) -> Iterator[WebDriver]:
    """Headless Chromium with a `width` × `height` window, console and network logged."""
    options = webdriver.ChromeOptions()
    options.add_argument(f"--window-size={width},{height}")
    options.set_capability("goog:loggingPrefs", {"browser": "ALL", "performance": "ALL"})
    with chromium(tmp, options) as driver:
        yield driver


def requested_urls(driver: WebDriver) -> list[str]:
    """Every network URL (http, https, ws, wss) the browser asked for since the last call
    (DevTools log); the browser's own chrome:// and data: loads are not the network."""
    urls = []
    for entry in driver.get_log("performance"):  # type: ignore[attr-defined]
        message: dict[str, Any] = json.loads(entry["message"])["message"]
        if message.get("method") == "Network.requestWillBeSent":
            url = message["params"]["request"]["url"]
            if url.split(":", 1)[0] in ("http", "https", "ws", "wss"):
                urls.append(url)
    return urls


def severe_logs(driver: WebDriver) -> list[dict[str, Any]]:
    """Console errors and failed loads the page reported."""
    return [e for e in driver.get_log("browser") if e["level"] == "SEVERE"]  # type: ignore[attr-defined]
