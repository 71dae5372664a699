"""What the browser tests start: taprigd on the simulated test piece, and headless Chromium.

Chromium and chromedriver are Debian's (/usr/bin/chromium, /usr/bin/chromedriver; `.ci/run`
installs them). Selenium is pointed at both, so it never tries to fetch a browser of its own.
A missing browser is an error, never a skip: the page is only tested in a real one.
"""

from __future__ import annotations

import contextlib
import json
import shutil
import signal
import subprocess
import sys
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any, TypeVar

from selenium import webdriver
from selenium.webdriver.chrome.service import Service as DriverService
from selenium.webdriver.remote.webdriver import WebDriver
from selenium.webdriver.support.wait import WebDriverWait

from taprig.firmware_protocol.simpiece.control import ControlClient

CHROMIUM = "/usr/bin/chromium"
CHROMEDRIVER = "/usr/bin/chromedriver"
LIMIT_S = 20.0  # the longest any one wait may take
# A phone held upright: CSS pixels and the pixel ratio of a common 6.1-inch handset.
PHONE = {"width": 412, "height": 915, "pixelRatio": 2.625}
T = TypeVar("T")


@dataclass
class Taprigd:
    """A running `taprigd run` on the simulated test piece (see `taprigd`)."""

    proc: subprocess.Popen[bytes]
    data_dir: Path
    log: Path
    port: int
    control_port: int | None

    @property
    def token(self) -> str:
        return (self.data_dir / "token").read_text(encoding="ascii").strip()

    @property
    def base(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    def control(self, **request: Any) -> dict[str, Any]:
        """One request to the simulated test piece's control port; its reply must be ok."""
        assert self.control_port is not None, "a simulated device has a control port; this has none"
        with ControlClient(self.control_port, timeout_s=5) as control:
            reply = control.request(**request)
        assert reply.get("ok") is True, reply
        return reply

    def tap(self, point: str, **faults: Any) -> None:
        self.control(op="tap", point=point, **faults)


@contextlib.contextmanager
def taprigd(
    tmp: Path,
    *settings: str,
    test: str = "shop-panel",
    args: tuple[str, ...] = (),
    prefix: tuple[str, ...] = (),
    bind: str = "127.0.0.1",
    device: str = "simulated",
) -> Iterator[Taprigd]:
    """`taprigd run` on `device` (default the simulated panel, with its control port) with
    `settings` (section.key=value) and `args` added, run under `prefix` (e.g. ``ip netns exec
    NS``), serving on `bind`."""
    data = tmp / "rig"
    data.mkdir()
    log = tmp / "taprigd.log"
    simulated = ("--sim-control", "0") if device.startswith("simulated") else ()
    cmd = [*prefix, sys.executable, "-m", "taprig.daemon", "run", "--test", test, *simulated,
           "--set", f"device.url={device}",
           "--set", f"store.data_dir={data}", "--set", f"service.bind={bind}",
           "--set", "service.port=0", "--set", "service.advertise=false",
           "--set", "store.min_free_mb=1", *args]  # fmt: skip
    for s in settings:
        cmd += ["--set", s]
    with log.open("w") as err:
        proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=err)
    try:
        run_file = data / "run.json"
        deadline = time.monotonic() + 30
        while not run_file.exists():
            assert proc.poll() is None, log.read_text()
            assert time.monotonic() < deadline, "taprigd never wrote run.json"
            time.sleep(0.05)
        record = json.loads(run_file.read_text())
        yield Taprigd(proc, data, log, record["port"], record["control_port"])
    finally:
        proc.send_signal(signal.SIGTERM)
        code = proc.wait(timeout=20)
    assert code == 0, log.read_text()


@contextlib.contextmanager
def chromium(tmp: Path, options: webdriver.ChromeOptions) -> Iterator[WebDriver]:
    """Headless Chromium with our usual flags added to `options`; a missing browser fails."""
    for path in (CHROMIUM, CHROMEDRIVER):
        if shutil.which(path) is None:
            raise RuntimeError(
                f"{path} is missing: install Debian's chromium and chromium-driver "
                "(.ci/run does); pages are tested only in a real browser"
            )
    options.binary_location = CHROMIUM
    profile = tmp / "chromium-profile"
    for flag in ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                 "--disable-background-networking", "--disable-component-update",
                 "--disable-sync", "--disable-dev-shm-usage", f"--user-data-dir={profile}",
                 "--autoplay-policy=no-user-gesture-required"):  # fmt: skip
        options.add_argument(flag)
    service = DriverService(CHROMEDRIVER, log_output=str(tmp / "chromedriver.log"))
    driver = webdriver.Chrome(service=service, options=options)
    try:
        yield driver
    finally:
        driver.quit()


@contextlib.contextmanager
def phone(tmp: Path) -> Iterator[WebDriver]:
    """Headless Chromium emulating a phone held upright (touch, its size and pixel ratio)."""
    options = webdriver.ChromeOptions()
    options.add_experimental_option("mobileEmulation", {"deviceMetrics": {**PHONE, "touch": True}})
    options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    with chromium(tmp, options) as driver:
        yield driver


def wait(driver: WebDriver, what: str, check: Callable[[WebDriver], T]) -> T:
    """The first truthy `check(driver)`, polled every 50 ms; fails naming `what` after LIMIT_S."""
    return WebDriverWait(driver, LIMIT_S, poll_frequency=0.05).until(
        check, f"the page never showed {what} within {LIMIT_S:g} s"
    )
