"""The view page in a real headless Chromium, against the simulated panel's known modes.

The modes are the panel's own (Leissa's simply supported plate, as the simulated test piece
simulates it), handed over through the modal-fit adapter, so every shape drawn is known.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import Any
from urllib.parse import urlsplit

import numpy as np
import pytest
from selenium.webdriver.common.action_chains import ActionChains
from selenium.webdriver.common.by import By
from selenium.webdriver.common.keys import Keys
from selenium.webdriver.remote.webdriver import WebDriver
from selenium.webdriver.support.select import Select

from taprig.client.view.geometry import Geometry, from_grid
from taprig.client.view.outline import parse_outline
from taprig.client.view.payload import normalise, spread
from taprig.client.view.server import ViewServer, ViewThread

from .browser import desktop, requested_urls, severe_logs, wait
from .conftest import Known

PAD_LEFT, PAD_RIGHT = 52, 10  # the charts' plot margins, CSS px (web/charts.js PAD)


@pytest.fixture
def page(known: Known, tmp_path: Path) -> Iterator[WebDriver]:
    server = ViewServer(known.data, known.modes, from_grid(known.data.grid))
    with ViewThread(server) as served, desktop(tmp_path) as driver:
        requested_urls(driver)  # forget the browser's own start-up
        driver.get(served.url)
        wait(driver, "two animated frames", lambda d: d.execute_script(
            "return window.taprigView && window.taprigView.frames >= 2"))  # fmt: skip
        yield driver


def frame(driver: WebDriver) -> dict[str, Any]:
    out: dict[str, Any] = driver.execute_script("return window.taprigView.lastFrame()")
    return out


def next_frame(driver: WebDriver, after: int) -> dict[str, Any]:
    return wait(driver, f"a frame after frame {after}",
                lambda d: (f := frame(d))["frame"] > after and f)  # fmt: skip


def click_at_frequency(driver: WebDriver, canvas_id: str, f_hz: float, f_top: float) -> None:
    """Click the canvas at frequency f_hz on its whole-band axis (0 to f_top Hz)."""
    canvas = driver.find_element(By.ID, canvas_id)
    width = canvas.size["width"]
    x = PAD_LEFT + f_hz / f_top * (width - PAD_LEFT - PAD_RIGHT)
    ActionChains(driver).move_to_element_with_offset(
        canvas, round(x - width / 2), 0
    ).click().perform()


def expected_positions(
    known: Known, mode: int, f: dict[str, Any], geo: Geometry | None = None
) -> np.ndarray:
    """x + a·s·Re(φ e^{iθ})·d for the model's own shape φ (normalised as the page's)."""
    geo = geo if geo is not None else from_grid(known.data.grid)
    phi = normalise(spread(known.modes.shape, known.modes.point, geo))[mode]
    value = (phi * np.exp(1j * f["phase"])).real
    return geo.xyz + f["amp"] * f["scale_m"] * value[:, None] * geo.directions


def test_the_page_draws_the_known_mode_moving(known: Known, page: WebDriver) -> None:
    """The first mode is selected at start; the positions drawn are the panel's shape to
    1e-6 m; consecutive frames differ; nothing went wrong in the console; every request
    went to the loopback server."""
    driver = page
    first = frame(driver)
    assert first["mode"] == 0 and first["layout"] == "solid"
    drawn = np.array(first["positions"]).reshape(-1, 3)
    assert np.abs(drawn - expected_positions(known, 0, first)).max() <= 1e-6
    second = next_frame(driver, first["frame"])
    assert second["phase"] != first["phase"]
    assert np.abs(np.array(second["positions"]) - np.array(first["positions"])).max() > 1e-6
    assert severe_logs(driver) == []
    hosts = {urlsplit(u).hostname for u in requested_urls(driver)}
    assert hosts == {"127.0.0.1"}, hosts
    assert driver.title.startswith(known.data.test)


def test_a_click_on_the_stabilization_diagram_selects_that_mode(
    known: Known, page: WebDriver
) -> None:
    driver = page
    top = float(known.data.freq_hz[-1])
    mode = 3
    click_at_frequency(driver, "stab", float(known.model.freqs_hz[mode]), top)
    wait(driver, "mode 4 selected", lambda d: d.execute_script(
        "return window.taprigView.selected") == mode)  # fmt: skip
    f = next_frame(driver, frame(driver)["frame"])
    assert f["mode"] == mode
    drawn = np.array(f["positions"]).reshape(-1, 3)
    assert np.abs(drawn - expected_positions(known, mode, f)).max() <= 1e-6
    row = driver.find_element(By.CSS_SELECTOR, f'#modes tbody tr[data-mode="{mode}"]')
    assert row.get_attribute("aria-selected") == "true"
    # keyboard: the diagram keeps the focus the click gave it; → picks the next mode
    ActionChains(driver).send_keys(Keys.ARROW_RIGHT).perform()
    wait(driver, "the next mode", lambda d: d.execute_script(
        "return window.taprigView.selected") == mode + 1)  # fmt: skip
    assert severe_logs(driver) == []


def test_frf_click_shows_the_deflection_and_the_flat_view_animates(
    known: Known, page: WebDriver
) -> None:
    driver = page
    Select(driver.find_element(By.ID, "which")).select_by_visible_text("B3")
    wait(driver, "B3's FRF", lambda d: any(
        "/data/point/" in u for u in requested_urls(d)))  # fmt: skip
    click_at_frequency(driver, "frf", float(known.model.freqs_hz[1]), float(known.data.freq_hz[-1]))
    note = wait(driver, "the deflection shape", lambda d: (
        t := d.find_element(By.ID, "shape-note").text) and "operating deflection" in t
        and t)  # fmt: skip
    assert "Hz" in note
    assert driver.execute_script("return window.taprigView.selected") == -1
    Select(driver.find_element(By.ID, "layout")).select_by_value("flat")
    f = wait(driver, "a flat frame", lambda d: (f := frame(d))["layout"] == "flat" and f)
    assert next_frame(driver, f["frame"])["phase"] != f["phase"]
    assert severe_logs(driver) == []


# E1 is measured sideways here (+y), R1 and R6 are not measured at all
BOX = """point E1 0.05 0.36 0.0 +y
point R1 0.05 0.40 -0.20 +y
point R6 0.55 0.40 -0.20 +y
face top
points A1 A2 A3 A4 A5 A6 B1 B2 B3 B4 B5 B6 C1 C2 C3 C4 C5 C6 D1 D2 D3 D4 D5 D6 E1 E2 E3 E4 E5 E6
face back
quad E1 E6 R6 R1
"""


def test_directions_and_unmeasured_points_are_drawn_as_given(known: Known, tmp_path: Path) -> None:
    """On an outline with a second face, each point moves along its own direction (E1
    sideways) and the unmeasured points stay at rest; positions to 1e-6 m."""
    geo = parse_outline(BOX, known.data.grid)
    server = ViewServer(known.data, known.modes, geo)
    with ViewThread(server) as served, desktop(tmp_path) as driver:
        driver.get(served.url)
        f = wait(driver, "an animated frame", lambda d: d.execute_script(
            "return window.taprigView && window.taprigView.frames >= 2") and frame(d))  # fmt: skip
        drawn = np.array(f["positions"]).reshape(-1, 3)
        assert np.abs(drawn - expected_positions(known, 0, f, geo)).max() <= 1e-6
        e1, r1 = geo.index("E1"), geo.index("R1")
        moved = drawn - geo.xyz
        assert moved[e1, 0] == 0 and moved[e1, 2] == 0
        assert np.all(moved[r1] == 0)
        assert severe_logs(driver) == []
