"""PNG plots: real files of sensible size whose curves carry the input data."""

from __future__ import annotations

import struct
import sys
from pathlib import Path

import numpy as np
import pytest

from taprig.client import dataset
from taprig.client.check import check
from taprig.client.errors import ClientError
from taprig.client.plots import frf_figure, shape_figure, write_plots
from taprig.firmware_protocol.simpiece import demo_panel

from .analytic import analytic_test_data

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


@pytest.fixture(scope="module")
def panel() -> dataset.TestData:
    return analytic_test_data(
        demo_panel(1500.0), np.arange(0.0, 1500.0 + 1e-9, 1.0), 0.5,
        points=("A1", "A3", "B3", "C4", "D2", "E5", "E6"),
    )  # fmt: skip


def png_size(path: Path) -> tuple[int, int]:
    """Width and height from the IHDR chunk (PNG specification, W3C, 2003, §11.2.2)."""
    head = path.read_bytes()[:24]
    assert head[:8] == PNG_SIGNATURE and head[12:16] == b"IHDR", path
    width, height = struct.unpack(">II", head[16:24])
    return int(width), int(height)


def test_write_plots_makes_valid_pngs(panel: dataset.TestData, tmp_path: Path) -> None:
    result = check(panel)
    paths = write_plots(panel, result, tmp_path / "plots")
    frfs = [p for p in paths if p.name.startswith("frf-")]
    shapes = [p for p in paths if p.name.startswith("shape-")]
    assert [p.name for p in frfs] == [f"frf-{p}.png" for p in panel.points]
    assert len(shapes) == len(result.modes) >= 3
    for path in paths:
        width, height = png_size(path)
        assert 400 <= width <= 2000 and 300 <= height <= 2000, (path.name, width, height)
        assert 10_000 < path.stat().st_size < 2_000_000, path.name


def test_frf_figure_plots_the_data(panel: dataset.TestData) -> None:
    fig = frf_figure(panel, 2)
    mag, phase, coh = fig.axes
    keep = panel.freq_hz > 0.0
    for r in range(len(panel.responses)):
        line = mag.lines[r]
        np.testing.assert_array_equal(line.get_xdata(), panel.freq_hz[keep])
        np.testing.assert_allclose(
            line.get_ydata(), 20.0 * np.log10(np.abs(panel.h1[2, r, keep])), rtol=1e-12
        )
        np.testing.assert_allclose(
            phase.lines[r].get_ydata(), np.degrees(np.angle(panel.h1[2, r, keep])), rtol=1e-12
        )
        np.testing.assert_array_equal(coh.lines[r].get_ydata(), panel.coherence[2, r, keep])
    assert "point B3" in mag.get_title()


def test_shape_figure_plots_the_shape(panel: dataset.TestData) -> None:
    result = check(panel)
    mode = result.modes[0]
    fig = shape_figure(result, mode, 1)
    ax = fig.axes[0]
    (dots,) = ax.collections
    np.testing.assert_array_equal(dots.get_array(), np.array(mode.shape))
    np.testing.assert_allclose(dots.get_offsets(), panel.coords[:, :2] * 1000.0)
    assert {t.get_text().split("\n")[0] for t in ax.texts} == set(panel.points)


def test_missing_matplotlib_names_the_extra(
    panel: dataset.TestData, monkeypatch: pytest.MonkeyPatch
) -> None:
    for name in [m for m in sys.modules if m == "matplotlib" or m.startswith("matplotlib.")]:
        monkeypatch.delitem(sys.modules, name)
    monkeypatch.setitem(sys.modules, "matplotlib", None)
    with pytest.raises(ClientError, match=r"taprig\[plots\]"):
        frf_figure(panel, 0)
