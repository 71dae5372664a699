"""`taprig view` as a user runs it: a test pulled from a real rig into the mirror, the page
served by the command (a real process) and opened in headless Chromium; --save's pictures;
a bad outline file."""

from __future__ import annotations

import os
import select
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from PIL import Image
from selenium.webdriver.common.by import By

from taprig.client.rigs import Places
from taprig.client.view.pictures import FRAMES
from tests.client.conftest import ServedRig, pair
from tests.client.test_cli import taprig

from .browser import desktop, requested_urls, severe_logs, wait
from .conftest import PANEL, TAU_S, analytic_test_data, commit_analytic

# 0 to 240 Hz: the panel's first four modes, so --save stays quick
FREQ = np.arange(0.0, 240.0 + 1e-9, 0.5)


@pytest.fixture
def mirrored(served: ServedRig, places: Places) -> Places:
    """The analytic panel test committed on a real rig, paired and pulled by the command."""
    commit_analytic(served.running, analytic_test_data(PANEL, FREQ, TAU_S))
    pair(places, served)
    pulled = taprig(places, "pull", "--json")
    assert pulled.returncode == 0, pulled.stderr
    return places


def first_line(proc: subprocess.Popen[str], limit_s: float = 60.0) -> str:
    """The process's first stdout line, waited for against a deadline."""
    assert proc.stdout is not None
    deadline = time.monotonic() + limit_s
    while time.monotonic() < deadline:
        ready, _, _ = select.select([proc.stdout], [], [], 0.2)
        if ready:
            return proc.stdout.readline()
        assert proc.poll() is None, proc.stderr.read() if proc.stderr else ""
    raise AssertionError(f"taprig view printed nothing within {limit_s:g} s")


def look_at_page(url: str, tmp_path: Path) -> None:
    with desktop(tmp_path) as driver:
        requested_urls(driver)
        driver.get(url)
        wait(driver, "an animated frame", lambda d: d.execute_script(
            "return window.taprigView && window.taprigView.frames >= 2"))  # fmt: skip
        caption = driver.find_element(By.ID, "modes-caption").text
        assert "modal fit" in caption and "quick-look" not in caption
        rows = driver.find_elements(By.CSS_SELECTOR, "#modes tbody tr")
        assert len(rows) >= 3
        assert severe_logs(driver) == []
        assert {u.split("/")[2] for u in requested_urls(driver)} == {url.split("/")[2]}


def test_view_serves_a_mirrored_test(mirrored: Places, tmp_path: Path) -> None:
    """The page loads the mirrored test with its modal fit, labelled as such, without console
    errors or requests off loopback; SIGTERM stops the command cleanly."""
    env = {**os.environ, "TAPRIG_HOME": str(mirrored.config.parent)}
    args = [sys.executable, "-m", "taprig.client", "view", "--no-browser"]
    with subprocess.Popen(args, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                          text=True) as proc:  # fmt: skip
        try:
            line = first_line(proc)
            assert line.startswith("taprig view: analytic-panel at http://127.0.0.1:"), line
            url = line.split(" at ", 1)[1].split()[0]
            look_at_page(url, tmp_path)
        finally:
            proc.send_signal(signal.SIGTERM)
            code = proc.wait(timeout=30)
        errors = proc.stderr.read() if proc.stderr else ""
    assert code == 0, errors


def test_view_save_writes_valid_pictures(mirrored: Places, tmp_path: Path) -> None:
    """One GIF per mode of FRAMES frames (one cycle), consecutive frames different, and one
    PNG sheet, all opened by Pillow."""
    out = tmp_path / "pictures"
    done = taprig(mirrored, "view", "analytic-panel", "--save", str(out), timeout=300)
    assert done.returncode == 0, done.stderr
    gifs = sorted(out.glob("mode-*.gif"))
    assert len(gifs) >= 3 and (out / "modes-sheet.png").is_file()
    assert done.stdout.count("picture ") == len(gifs) + 1
    for gif in gifs:
        with Image.open(gif) as image:
            assert image.format == "GIF" and image.n_frames == FRAMES
            assert image.size[0] >= 400
            first = np.asarray(image.convert("RGB"))
            image.seek(FRAMES // 4)  # a quarter cycle on: the shape has moved
            assert (np.asarray(image.convert("RGB")) != first).any()
    with Image.open(out / "modes-sheet.png") as sheet:
        sheet.verify()
        assert sheet.format == "PNG"


def test_a_bad_outline_file_is_one_line_on_stderr(mirrored: Places, tmp_path: Path) -> None:
    outline = tmp_path / "panel.outline"
    outline.write_text("face top\npoints A1 A2 B1\nquad A1 A2 Q7 B1\n", encoding="utf-8")
    bad = taprig(mirrored, "view", "--geometry", str(outline), "--no-browser")
    assert bad.returncode == 2
    assert (
        bad.stderr
        == f"taprig: {outline} line 3: unknown point 'Q7' (not in the test's grid nor added)\n"
    )
