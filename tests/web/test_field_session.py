"""The operator's session on the phone page, in headless Chromium against `taprigd run` on the
simulated test piece: the test's end, measuring again, undo, a reload with a tap waiting, the
device unplugged, and lost Wi-Fi (a network namespace whose link goes down).
"""

from __future__ import annotations

import contextlib
import json
import os
import secrets
import shutil
import subprocess
import time
import urllib.request
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from selenium.webdriver.common.by import By
from selenium.webdriver.remote.webdriver import WebDriver

from tests.daemon.test_config import CHANNELS_3

from .harness import Taprigd, phone, taprigd, wait
from .test_phone_page import (
    check_legible_and_thumb_sized,
    click,
    data,
    last_hit,
    pair,
    shot,
    state,
    text,
    verdict,
)

IP = shutil.which("ip", path=os.pathsep.join([os.environ.get("PATH", ""), "/usr/sbin", "/sbin"]))


def api(rig: Taprigd, path: str) -> Any:
    req = urllib.request.Request(f"{rig.base}{path}")
    req.add_header("Authorization", f"Bearer {rig.token}")
    with urllib.request.urlopen(req, timeout=5) as resp:
        return json.loads(resp.read())


def shown(d: WebDriver, element_id: str) -> bool:
    return bool(d.find_element(By.ID, element_id).is_displayed())


def press(d: WebDriver, element_id: str) -> None:
    """Scroll the control to the middle of the screen (clear of the sticky bar), as a thumb
    would, and tap it."""
    element = d.find_element(By.ID, element_id)
    d.execute_script("arguments[0].scrollIntoView({block: 'center'})", element)
    element.click()


def small_grid(tmp: Path) -> tuple[str, ...]:
    """Two points of the simulated panel as a grid file: a test that ends after a few taps."""
    csv = tmp / "grid.csv"
    csv.write_text("label,x,y,z\nA1,0.05,0.05,0\nB2,0.15,0.15,0\n", encoding="utf-8")
    return ("--grid", str(csv))


def test_the_last_point_ends_the_test_and_measuring_again_is_deliberate(tmp_path: Path) -> None:
    """Completion disarms, the page says the test is done with its tally and what to do next;
    a stray tap after it is not stored; a point is measured again only by choosing to."""
    with (
        taprigd(
            tmp_path, "capture.averages=1", test="two-points", args=small_grid(tmp_path)
        ) as rig,
        phone(tmp_path) as d,
    ):
        assert pair(d, rig.base, rig.token) == "A1"
        assert not shown(d, "finished")
        rig.tap("A1")
        wait(d, "A1 done", lambda d: verdict(d) == "A1 done")
        wait(d, "the next point", lambda d: text(d, "point") == "B2")
        rig.tap("B2")
        wait(d, "the test done", lambda d: shown(d, "finished"))
        assert not shown(d, "verdict")  # the finished panel stands in for it
        summary = text(d, "finished-summary")
        assert summary.startswith("2 of 2 points · 2 averages · 0 rejected taps · ")
        assert "taprig pull" in text(d, "finished-next")
        wait(d, "the rig disarmed", lambda d: text(d, "armed") == "not armed")
        st = state(rig)["session"]
        assert st["complete"] and not st["armed"] and st["tally"]["points"] == 2
        shot(d, tmp_path / "1-test-done.png")

        # A stray tap after the end: seen, not stored.
        seen = state(rig)["hits_seen"]
        rig.tap("B2")
        wait(d, "the stray tap seen", lambda d: state(rig)["hits_seen"] > seen)
        assert len(api(rig, "/v1/points?test=two-points")["points"]) == 2

        # Measuring A1 again: choose it on the grid, then say so.
        d.find_element(By.CSS_SELECTOR, '#grid [data-label="A1"]').click()
        wait(d, "A1 chosen", lambda d: text(d, "point") == "A1")
        # The verdict follows the cursor event a moment later on a busy machine.
        wait(d, "A1 said measured",
             lambda d: verdict(d) == "A1 is measured" and shown(d, "remeasure"))  # fmt: skip
        assert shown(d, "finished")  # the test is still done: its words are checked here too
        check_legible_and_thumb_sized(d)
        press(d, "remeasure")
        wait(d, "A1 open again", lambda d: verdict(d) == "Measuring A1 again")
        assert not shown(d, "finished") and not shown(d, "remeasure")
        press(d, "arm")
        wait(d, "the rig armed", lambda d: text(d, "armed") == "armed")
        rig.tap("A1")
        wait(d, "the test done again", lambda d: shown(d, "finished"))
        versions = sorted(p["version"] for p in api(rig, "/v1/points?test=two-points")["points"])
        assert versions == [1, 1, 2]
        assert not state(rig)["session"]["armed"]


def test_undo_a_wrong_accept_and_a_reload_keeps_the_waiting_tap(tmp_path: Path) -> None:
    """Operator accept: a tap accepted by mistake is taken back; a tap waiting for a decision
    is still waiting, with its verdict and Accept/Reject, after the page is reloaded. The
    plots: |H1| and γ² over the force band the rig served, the force around its pulses."""
    with (
        taprigd(tmp_path, "capture.accept=operator", "capture.averages=2") as rig,
        phone(tmp_path) as d,
    ):
        point = pair(d, rig.base, rig.token)
        assert not shown(d, "undo")
        rig.tap(point)
        wait(d, "the tap held", lambda d: verdict(d) == "Keep this tap?")
        click(d, "accept")
        wait(d, "the tap counted", lambda d: verdict(d) == "Counted 1 of 2")
        wait(d, "the undo button", lambda d: shown(d, "undo"))

        # The plots span what the rig served: the band, and the force around the pulse.
        served = last_hit(rig)
        low, top = served["band_hz"]
        assert 0 < low < top < served["rate_hz"] / 2
        wait(
            d,
            "the FRF over the band",
            lambda d: data(d, "plot-frf", "band") == f"{_js(low)} {_js(top)}",
        )
        z = served["force_zoom"]
        span = str(data(d, "plot-force", "span")).split()
        assert [float(v) for v in span] == pytest.approx([1000 * z["start_s"], 1000 * z["end_s"]])
        assert z["end_s"] - z["start_s"] < 0.1 * served["duration_s"]
        shot(d, tmp_path / "1-counted.png")
        check_legible_and_thumb_sized(d)

        click(d, "undo")
        wait(d, "the tap taken back", lambda d: verdict(d) == "Tap taken back")
        assert text(d, "avg-text") == "average 0 of 2"
        wait(d, "no more undo", lambda d: not shown(d, "undo"))
        assert state(rig)["session"]["averages"] == 0

        # A tap waits for a decision; the page is reloaded; the decision is still offered.
        rig.tap(point)
        wait(d, "the tap held", lambda d: verdict(d) == "Keep this tap?")
        d.refresh()
        wait(d, "the live stream", lambda d: text(d, "link-chip") == "live")
        wait(d, "the held tap again", lambda d: verdict(d) == "Keep this tap?")
        assert d.find_element(By.ID, "accept").is_enabled()
        assert d.find_element(By.ID, "reject").is_enabled()
        shot(d, tmp_path / "2-reloaded.png")
        click(d, "accept")
        wait(d, "the tap counted", lambda d: verdict(d) == "Counted 1 of 2")


def _js(v: float) -> str:
    """A number as JavaScript writes it in a template string."""
    return str(int(v)) if float(v).is_integer() else repr(float(v))


def test_an_unplugged_device_shows_at_the_top_within_a_second(tmp_path: Path) -> None:
    with taprigd(tmp_path) as rig, phone(tmp_path) as d:
        pair(d, rig.base, rig.token)
        wait(d, "the rig armed", lambda d: text(d, "armed") == "armed")
        assert not shown(d, "device-alert")
        start = time.monotonic()
        rig.control(op="unplug")
        wait(d, "the device lost", lambda d: shown(d, "device-alert"))
        took = time.monotonic() - start
        words = text(d, "device-alert")
        assert took < 1.0, took
        assert words.startswith("Armed · device lost: ") and "not counted" in words
        # At the top: the banner's top edge within the first 130 px of the page.
        assert d.find_element(By.ID, "device-alert").rect["y"] < 130
        shot(d, tmp_path / "device-lost.png")
        check_legible_and_thumb_sized(d)
        rig.control(op="replug")
        wait(d, "the device back", lambda d: not shown(d, "device-alert"))


def test_the_page_waits_for_a_device_that_is_not_there(tmp_path: Path) -> None:
    """The service and the page run while the rig waits for its device; the page says what it
    waits for, with the OS's reason the path cannot be opened."""
    missing = tmp_path / "no-such-tty"
    config = tmp_path / "taprigd.toml"
    config.write_text(CHANNELS_3, encoding="utf-8")
    with (
        taprigd(
            tmp_path, device=str(missing), test="waiting", args=("--config", str(config))
        ) as rig,
        phone(tmp_path) as d,
    ):
        d.get(f"{rig.base}/pair#token={rig.token}")
        wait(d, "a live event stream", lambda d: text(d, "link-chip") == "live")
        wait(d, "the wait said", lambda d: shown(d, "device-alert"))
        words = text(d, "device-alert")
        assert f"waiting for the device ({missing})" in words
        assert "No such file or directory" in words and "identify" not in words
        st = state(rig)["session"]
        assert st["state"] == "disconnected" and not st["identified"]
    assert "did not identify itself" not in rig.log.read_text()


# -------------------------------------------------------------- lost Wi-Fi, in a namespace


def _ip(*args: str) -> None:
    assert IP is not None
    subprocess.run([IP, *args], check=True, capture_output=True, text=True, timeout=10)


@contextlib.contextmanager
def wifi() -> Iterator[tuple[str, str, str]]:
    """A network namespace for the rig, joined to this one by a veth pair (the "Wi-Fi"):
    (namespace, our end's interface, the rig's address)."""
    in_ci = os.environ.get("CI", "").lower() not in ("", "0", "false")
    if os.geteuid() != 0 and not in_ci:
        pytest.skip("needs root to create a network namespace (set CI=true to require it)")
    if IP is None:
        pytest.fail("the ip command (iproute2) is not installed")
    tag = secrets.token_hex(3)
    ns, here, there = f"taprig-wifi-{tag}", f"tw{tag}h", f"tw{tag}r"
    octet = 16 + secrets.randbelow(200)
    mine, rigs = f"10.231.{octet}.1", f"10.231.{octet}.2"
    _ip("netns", "add", ns)
    try:
        _ip("link", "add", here, "type", "veth", "peer", "name", there)
        try:
            _ip("link", "set", there, "netns", ns)
            _ip("addr", "add", f"{mine}/24", "dev", here)
            _ip("link", "set", here, "up")
            _ip("-n", ns, "addr", "add", f"{rigs}/24", "dev", there)
            _ip("-n", ns, "link", "set", there, "up")
            _ip("-n", ns, "link", "set", "lo", "up")
            yield ns, here, rigs
        finally:
            with contextlib.suppress(subprocess.CalledProcessError):
                _ip("link", "del", here)
    finally:
        _ip("netns", "del", ns)


def test_lost_wifi_is_noticed_within_five_seconds(tmp_path: Path) -> None:
    """The rig in its own namespace; the phone reaches it over a veth link, which goes down
    (no FIN, no RST: packets just stop, as when a phone walks out of Wi-Fi range). The page
    says so within 5 s (the heartbeat), and is live again once the link is back."""
    with wifi() as (ns, here, address):
        assert IP is not None
        with (
            taprigd(tmp_path, prefix=(IP, "netns", "exec", ns), bind="0.0.0.0") as rig,
            phone(tmp_path) as d,
        ):
            base = f"http://{address}:{rig.port}"
            pair(d, base, rig.token)
            _ip("link", "set", here, "down")
            start = time.monotonic()
            wait(d, "the link lost", lambda d: text(d, "link-chip") != "live")
            took = time.monotonic() - start
            assert took < 5.0, took
            wait(d, "the warning", lambda d: shown(d, "offline"))
            shot(d, tmp_path / "wifi-lost.png")
            _ip("link", "set", here, "up")
            wait(d, "the link back", lambda d: text(d, "link-chip") == "live")
            assert not shown(d, "offline")
