"""A configuration with several mistakes reports all of them at once, as a process would."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from taprig.daemon.config import load_config
from taprig.daemon.errors import ConfigError

BAD = """
[rig]
nmae = "shop"

[capture]
block = 1000
averages = 0

[windows]
exponential_end = 2

[[channels]]
index = 0
role = "force"
label = "hammer"
sensitivity = 2.25
unit = "mV/N"

[[channels]]
index = 1
role = "respons"
label = "acc1"
sensitivity = 1.02
unit = "mV/(m/s^2)"

[[channels]]
index = 2
role = "response"
label = "acc2"
sensitivity = -1
unit = "mV/(m/s^2)"
"""

EXPECTED = [
    "rig.nmae = \"shop\": unknown setting; did you mean rig.name?",
    "capture.block = 1000: must be",
    "capture.averages = 0: must be",
    "windows.exponential_end = 2: must be",
    "channels[1].role = \"respons\"",
    "channels[2].sensitivity = -1: must be",
    "override capture.blok = 4096: unknown setting; did you mean capture.block?",
]


def test_every_mistake_is_reported_in_one_error(tmp_path: Path) -> None:
    path = tmp_path / "bad.toml"
    path.write_text(BAD, encoding="utf-8")
    with pytest.raises(ConfigError) as caught:
        load_config(path, ["capture.blok=4096"], environ={})
    text = str(caught.value)
    assert text.startswith(f"{len(EXPECTED)} mistakes in the configuration:")
    for i, part in enumerate(EXPECTED, 1):
        assert f"  {i}. " in text and part in text, (part, text)


def test_one_mistake_is_one_line(tmp_path: Path) -> None:
    with pytest.raises(ConfigError) as caught:
        load_config(None, ["capture.averages=0"], environ={})
    assert "\n" not in str(caught.value) and "mistakes" not in str(caught.value)


def test_taprigd_prints_them_all_and_exits_2(tmp_path: Path) -> None:
    path = tmp_path / "bad.toml"
    path.write_text(BAD, encoding="utf-8")
    done = subprocess.run([sys.executable, "-m", "taprig.daemon", "run", "-c", str(path),
                           "--set", "capture.blok=4096"],
                          capture_output=True, text=True, timeout=60)  # fmt: skip
    assert done.returncode == 2, done.stderr
    assert "Traceback" not in done.stderr
    assert all(part in done.stderr for part in EXPECTED), done.stderr
