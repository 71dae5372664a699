"""The phone page asks where the sensors sit when the selected roving-hammer test lacks it.

Headless Chromium against `taprigd run` on the simulated panel: the test the rig opens knows
its sensors' places (the simulated panel carries them), so no prompt; a test made over the
API without them, once selected, brings the prompt, naming the sensors and how to give them.
"""

from __future__ import annotations

import json
import secrets
import urllib.error
import urllib.request
from pathlib import Path
from typing import Any

from selenium.webdriver.common.by import By

from .harness import Taprigd, phone, taprigd, wait
from .test_new_test import stored, type_into, value
from .test_phone_page import pair, state, text


def post(rig: Taprigd, path: str, body: dict[str, Any]) -> dict[str, Any]:
    req = urllib.request.Request(f"{rig.base}{path}", method="POST",
                                 data=json.dumps({"request_id": secrets.token_urlsafe(16),
                                                  **body}).encode())  # fmt: skip
    req.add_header("Authorization", f"Bearer {rig.token}")
    req.add_header("Content-Type", "application/json")
    try:
        with urllib.request.urlopen(req, timeout=10) as resp:
            return json.loads(resp.read())  # type: ignore[no-any-return]
    except urllib.error.HTTPError as exc:
        raise AssertionError(f"{path}: {exc.code} {exc.read().decode()}") from None


def test_a_test_without_sensor_places_brings_a_prompt(tmp_path: Path) -> None:
    with taprigd(tmp_path) as rig, phone(tmp_path) as d:
        pair(d, rig.base, rig.token)
        assert not d.find_element(By.ID, "places").is_displayed()
        assert state(rig)["sensors_missing"] == []
        grid = [{"label": "P1", "x": 0.0, "y": 0.0, "z": 0.0},
                {"label": "P2", "x": 0.1, "y": 0.0, "z": 0.0}]  # fmt: skip
        made = post(rig, "/v1/tests", {"name": "bare", "grid": grid})
        assert made["meta"]["sensors_missing"] == ["acc1", "acc2"]
        assert made["reference"] == ""  # never the first grid point
        post(rig, "/v1/session/select", {"test": "bare"})
        wait(d, "the sensor prompt", lambda d: d.find_element(By.ID, "places").is_displayed())
        prompt = text(d, "places")
        assert prompt.startswith("Where do acc1, acc2 sit?") and "--sensor-at acc1=" in prompt
        assert state(rig)["sensors_missing"] == ["acc1", "acc2"]
        post(rig, "/v1/session/select", {"test": "shop-panel"})
        wait(d, "the prompt gone", lambda d: not d.find_element(By.ID, "places").is_displayed())


def test_the_prompt_makes_the_test_again_with_places(tmp_path: Path) -> None:
    """From the prompt, the new-test form starts from the bare test's grid; with both places
    given, the new test is selected and the prompt goes."""
    with taprigd(tmp_path) as rig, phone(tmp_path) as d:
        pair(d, rig.base, rig.token)
        grid = [{"label": "P1", "x": 0.0, "y": 0.0, "z": 0.0},
                {"label": "P2", "x": 0.1, "y": 0.0, "z": 0.0, "direction": "-z"}]  # fmt: skip
        post(rig, "/v1/tests", {"name": "bare", "grid": grid})
        post(rig, "/v1/session/select", {"test": "bare"})
        wait(d, "the sensor prompt", lambda d: d.find_element(By.ID, "places").is_displayed())
        d.find_element(By.ID, "places-new").click()
        wait(d, "the form", lambda d: d.find_element(By.ID, "maker-create").is_displayed())
        assert value(d, "mk-name") == "bare-2"
        assert value(d, "mk-grid").splitlines() == ["label,x,y,z,direction", "P1,0,0,0,+z",
                                                    "P2,0.1,0,0,-z"]  # fmt: skip
        type_into(d, "mk-at-acc1", "P1")
        type_into(d, "mk-at-acc2", "P2")
        d.find_element(By.ID, "maker-create").click()
        wait(d, "the new test selected", lambda d: text(d, "test-button") == "bare-2")
        wait(d, "the prompt gone", lambda d: not d.find_element(By.ID, "places").is_displayed())
        made = stored(rig, "bare-2")
        assert made is not None and made["meta"]["sensors_missing"] == []
        assert made["meta"]["sensor_points"] == {"acc1": "P1", "acc2": "P2"}
        assert [row[4] for row in made["grid"]] == ["+z", "-z"]
