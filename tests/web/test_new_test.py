"""The phone page makes a test: name, averages, a grid typed or made from rows × columns, and
where each response sensor sits, sent to the rig's create-test request.

Headless Chromium against `taprigd run` on the simulated panel (tests/web/harness.py). What
the form sent is read back over the API (`GET /v1/tests/{name}`): the grid's coordinates
against the spacing typed (millimetres to metres, 1 mm = 0.001 m, SI), the sensors' places
and directions. A bad grid line is refused by the rig with its line number, shown beside the
grid, and nothing typed is cleared; mending that line and sending again makes the test.
"""

from __future__ import annotations

import json
import math
import urllib.error
import urllib.request
from pathlib import Path
from typing import Any

from selenium.webdriver.common.by import By
from selenium.webdriver.remote.webdriver import WebDriver
from selenium.webdriver.support.select import Select

from .harness import Taprigd, phone, taprigd, wait
from .test_phone_page import check_legible_and_thumb_sized, click, pair, shot, state, text


def stored(rig: Taprigd, name: str) -> dict[str, Any] | None:
    """The rig's test `name` over the API, None when it has none."""
    req = urllib.request.Request(f"{rig.base}/v1/tests/{name}")
    req.add_header("Authorization", f"Bearer {rig.token}")
    try:
        with urllib.request.urlopen(req, timeout=5) as resp:
            return json.loads(resp.read())  # type: ignore[no-any-return]
    except urllib.error.HTTPError as exc:
        if exc.code == 404:
            return None
        raise


def value(d: WebDriver, element_id: str) -> str:
    return str(d.find_element(By.ID, element_id).get_attribute("value"))


def type_into(d: WebDriver, element_id: str, words: str) -> None:
    field = d.find_element(By.ID, element_id)
    field.clear()
    field.send_keys(words)


def open_form(d: WebDriver) -> None:
    click(d, "test-button")
    wait(d, "the test chooser", lambda d: d.find_element(By.ID, "new-test").is_displayed())
    click(d, "new-test")
    wait(d, "the new-test form", lambda d: d.find_element(By.ID, "maker-create").is_displayed())


def shown_error(d: WebDriver, part: str) -> str:
    """The refusal shown beside `part` of the form, once there is one."""
    error = f"mk-{part}-error"
    wait(d, f"an error beside {part}", lambda d: d.find_element(By.ID, error).is_displayed())
    return text(d, error)


def test_the_form_makes_a_test_with_its_sensor_places(tmp_path: Path) -> None:
    """3 × 4 points 150 mm across and 120 mm down: A1 top left at (0, 0.24) m, C4 at
    (0.45, 0) m (plan view, y up); acc1 on B2 along +z, acc2 off the grid along -z."""
    with taprigd(tmp_path) as rig, phone(tmp_path) as d:
        pair(d, rig.base, rig.token)
        open_form(d)
        type_into(d, "mk-name", "door-left")
        type_into(d, "mk-averages", "3")
        for field, number in (("mk-rows", "3"), ("mk-cols", "4"), ("mk-across", "150"),
                              ("mk-down", "120")):  # fmt: skip
            type_into(d, field, number)
        Select(d.find_element(By.ID, "mk-unit")).select_by_visible_text("mm")
        click(d, "mk-fill")
        lines = value(d, "mk-grid").strip().splitlines()
        assert lines[0] == "label,x,y,z" and len(lines) == 1 + 12, lines
        type_into(d, "mk-at-acc1", "B2")
        type_into(d, "mk-at-acc2", "0.5,0.3,0")
        Select(d.find_element(By.ID, "mk-dir-acc2")).select_by_visible_text("-z")
        check_legible_and_thumb_sized(d)
        shot(d, tmp_path / "1-new-test-form.png")
        click(d, "maker-create")

        wait(d, "the new test selected", lambda d: text(d, "test-button") == "door-left")
        wait(d, "its first point", lambda d: text(d, "point") == "A1")
        assert not d.find_element(By.ID, "maker").is_displayed()
        assert text(d, "verdict-title") == "Ready at A1"
        assert text(d, "arm") == "Arm" and text(d, "armed") == "not armed"
        assert "arm the rig" in text(d, "notice").lower()
        shot(d, tmp_path / "2-new-test-ready.png")

        test = stored(rig, "door-left")
        assert test is not None and test["averages"] == 3
        xyz = {row[0]: row[1:4] for row in test["grid"]}
        assert len(xyz) == 12
        assert xyz["A1"] == [0.0, 0.24, 0.0] and xyz["C4"] == [0.45, 0.0, 0.0]
        assert all(math.isclose(a, b, abs_tol=1e-12)
                   for a, b in zip(xyz["B3"], [0.30, 0.12, 0.0], strict=True))  # fmt: skip
        sensors = test["meta"]["sensors"]
        assert sensors["acc1"]["point"] == "B2" and sensors["acc1"]["direction"] == "+z"
        assert sensors["acc2"]["point"] is None and sensors["acc2"]["xyz"] == [0.5, 0.3, 0.0]
        assert sensors["acc2"]["unit"] == [0.0, 0.0, -1.0]
        assert test["meta"]["sensors_missing"] == [] and test["reference"] == "B2"
        now = state(rig)
        assert now["session"]["test"] == "door-left" and not now["session"]["armed"]
        assert now["sensors_missing"] == []


BAD_GRID = "label,x,y,z\nP1,0,0,0\nP2,0.1,zz,0\nP3,0.2,0,0\n"


def test_a_bad_grid_line_is_shown_beside_the_grid_and_nothing_typed_is_lost(
    tmp_path: Path,
) -> None:
    """The rig's 400 names line 3 of the CSV; the form keeps every field; mended, it goes
    through. A name the rig already has (its 409) is shown beside the name."""
    with taprigd(tmp_path) as rig, phone(tmp_path) as d:
        pair(d, rig.base, rig.token)
        open_form(d)
        type_into(d, "mk-name", "shop-panel")  # the test the rig opened
        type_into(d, "mk-grid", BAD_GRID)
        type_into(d, "mk-at-acc1", "P2")
        click(d, "maker-create")
        error = shown_error(d, "grid")
        assert "line 3" in error and "zz" in error, error
        assert d.execute_script("return document.getElementById('mk-grid').dataset.line") == "3"
        selected = d.execute_script(
            "const g = document.getElementById('mk-grid');"
            "return g.value.slice(g.selectionStart, g.selectionEnd);"
        )
        assert selected == "P2,0.1,zz,0"
        assert d.find_element(By.ID, "maker").is_displayed()
        assert value(d, "mk-name") == "shop-panel"
        assert value(d, "mk-grid") == BAD_GRID
        assert value(d, "mk-at-acc1") == "P2"
        shot(d, tmp_path / "3-bad-grid-line.png")

        type_into(d, "mk-grid", BAD_GRID.replace("zz", "0"))
        click(d, "maker-create")
        assert "already" in shown_error(d, "name")
        assert not d.find_element(By.ID, "mk-grid-error").is_displayed()
        assert value(d, "mk-at-acc1") == "P2"

        type_into(d, "mk-name", "shop-panel-b")
        click(d, "maker-create")
        wait(d, "the new test selected", lambda d: text(d, "test-button") == "shop-panel-b")
        test = stored(rig, "shop-panel-b")
        assert test is not None and [row[0] for row in test["grid"]] == ["P1", "P2", "P3"]
        assert test["meta"]["sensors"]["acc1"]["point"] == "P2"
        assert test["meta"]["sensors_missing"] == ["acc2"]
