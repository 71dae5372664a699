"""Headless Chromium on a desktop-sized window for the view page, and what it saw.

Debian's chromium and chromedriver, as for the phone page (tests/web/harness.py); the
performance log gives every request the page made, so a test can show none left loopback.
"""

from __future__ import annotations

import contextlib
import json
import shutil
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from selenium import webdriver
from selenium.webdriver.chrome.service import Service as DriverService
from selenium.webdriver.remote.webdriver import WebDriver

from tests.web.harness import CHROMEDRIVER, CHROMIUM, wait

__all__ = ["desktop", "requested_urls", "severe_logs", "wait"]


@contextlib.contextmanager
def desktop(tmp: Path, width: int = 1400, height: int = 1000) -> Iterator[WebDriver]:
    """Headless Chromium with a `width` × `height` window; a missing browser is an error."""
    for path in (CHROMIUM, CHROMEDRIVER):
        if shutil.which(path) is None:
            raise RuntimeError(f"{path} is missing: install Debian's chromium and chromium-driver")
    options = webdriver.ChromeOptions()
    options.binary_location = CHROMIUM
    for flag in ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                 "--disable-background-networking", "--disable-component-update", "--disable-sync",
                 "--disable-dev-shm-usage", f"--user-data-dir={tmp / 'chromium-profile'}",
                 f"--window-size={width},{height}"):  # fmt: skip
        options.add_argument(flag)
    options.set_capability("goog:loggingPrefs", {"browser": "ALL", "performance": "ALL"})
    service = DriverService(CHROMEDRIVER, log_output=str(tmp / "chromedriver.log"))
    driver = webdriver.Chrome(service=service, options=options)
    try:
        yield driver
    finally:
        driver.quit()


def requested_urls(driver: WebDriver) -> list[str]:
    """Every URL the page asked the network for since the last call (DevTools log)."""
    urls = []
    for entry in driver.get_log("performance"):  # type: ignore[attr-defined]
        message: dict[str, Any] = json.loads(entry["message"])["message"]
        if message.get("method") == "Network.requestWillBeSent":
            urls.append(message["params"]["request"]["url"])
    return urls


def severe_logs(driver: WebDriver) -> list[dict[str, Any]]:
    """Console errors and failed loads the page reported."""
    return [e for e in driver.get_log("browser") if e["level"] == "SEVERE"]  # type: ignore[attr-defined]
