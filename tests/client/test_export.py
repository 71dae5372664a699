"""Exports for fitting: exact round trips; accelerance, mobility and receptance of one mode."""

from __future__ import annotations

import csv
import io
import json
import math
import sys
from pathlib import Path

import h5py
import numpy as np
import pytest

from taprig.client import dataset
from taprig.client.errors import ClientError
from taprig.client.export import UNITS, export
from taprig.firmware_protocol.simpiece import ModalModel, demo_panel

from .analytic import analytic_test_data

FREQ = np.arange(0.0, 2000.0 + 1e-9, 2.0)  # Hz


@pytest.fixture(scope="module")
def panel() -> dataset.TestData:
    """Six grid points of the demo panel, both sensors, with H2 made unequal to H1."""
    data = analytic_test_data(
        demo_panel(2500.0), FREQ, 0.25, points=("A1", "B3", "C4", "D2", "E6", "A4")
    )
    rng = np.random.default_rng(3)
    coherence = 1.0 - 0.1 * rng.random(data.coherence.shape)
    h2 = data.h1 / coherence  # H2 = H1/γ² (Bendat & Piersol, Random Data, 2010, §9.2)
    meta = {**data.meta, "block": 16384, "windows": {"exponential_end": 0.01}, "rig": "r"}
    return dataset.TestData(**{**_fields(data), "h2": h2, "coherence": coherence, "meta": meta})


def _fields(data: dataset.TestData) -> dict[str, object]:
    return {name: getattr(data, name) for name in dataset.TestData.__dataclass_fields__}


def sdof(f_n: float = 100.0, zeta: float = 0.02) -> dataset.TestData:
    """One mode, unit modal mass, struck and measured at the same point, no window."""
    model = ModalModel(
        labels=("P",), coords=np.zeros((1, 3)), freqs_hz=np.array([f_n]),
        damping_ratio=np.array([zeta]), shapes=np.ones((1, 1)), sensors={"acc": "P"},
        grid=("P",),
    )  # fmt: skip
    return analytic_test_data(model, FREQ, math.inf)


def test_npz_round_trip(panel: dataset.TestData, tmp_path: Path) -> None:
    out = export(panel, tmp_path / "panel.npz", "npz")
    with np.load(out, allow_pickle=False) as z:
        np.testing.assert_array_equal(z["freq"], panel.freq_hz)
        np.testing.assert_array_equal(z["H1"], panel.h1)
        np.testing.assert_array_equal(z["H2"], panel.h2)
        np.testing.assert_array_equal(z["coherence"], panel.coherence)
        np.testing.assert_array_equal(z["coord"], panel.coords)
        np.testing.assert_array_equal(z["n_averages"], panel.n_averages)
        assert list(z["point"]) == list(panel.points)
        assert list(z["response"]) == ["acc1", "acc2"]
        assert list(z["direction"]) == ["+z"] * 6
        assert float(z["exp_tau_s"]) == 0.25
        meta = json.loads(str(z["meta"]))
    assert meta["quantity"] == "accelerance" and meta["unit"] == "(m/s^2)/N"
    assert meta["block"] == 16384 and meta["windows"] == {"exponential_end": 0.01}
    assert meta["band_hz"] is None and meta["drive_points"] == list(panel.points)
    assert meta["point_set_ids"] == list(panel.point_set_ids)
    assert not list(tmp_path.glob(".*part"))


def test_hdf5_round_trip(panel: dataset.TestData, tmp_path: Path) -> None:
    out = export(panel, tmp_path / "panel.h5", "hdf5", "mobility", (100.0, 900.0))
    keep = (FREQ >= 100.0) & (FREQ <= 900.0)
    with h5py.File(out, "r") as fh:
        np.testing.assert_array_equal(fh["freq"][()], FREQ[keep])
        omega = 2.0 * np.pi * FREQ[keep]
        np.testing.assert_array_equal(fh["H1"][()], panel.h1[..., keep] * (1.0 / (1j * omega)))
        np.testing.assert_array_equal(fh["coherence"][()], panel.coherence[..., keep])
        assert [p.decode() for p in fh["point"][()]] == list(panel.points)
        assert float(fh["exp_tau_s"][()]) == 0.25
        assert fh.attrs["quantity"] == "mobility" and fh.attrs["unit"] == "(m/s)/N"
        meta = json.loads(fh.attrs["meta"])
    assert meta["band_hz"] == [100.0, 900.0] and meta["sample_rate_hz"] == 4000.0


def test_csv_round_trip_is_exact(panel: dataset.TestData, tmp_path: Path) -> None:
    """Every float reads back bit for bit (repr is the shortest exact text, Python docs)."""
    out = export(panel, tmp_path / "panel.csv", "csv", "receptance", (10.0, 50.0))
    text = out.read_text(encoding="utf-8")
    comments = [line for line in text.splitlines() if line.startswith("#")]
    assert "quantity: receptance; unit: m/N" in comments[1]
    rows = list(
        csv.DictReader(io.StringIO("\n".join(t for t in text.splitlines() if t[:1] != "#")))
    )
    keep = (FREQ >= 10.0) & (FREQ <= 50.0)
    n_f = int(keep.sum())
    assert len(rows) == len(panel.points) * 2 * n_f
    factor = -1.0 / (2.0 * np.pi * FREQ[keep]) ** 2
    for k, row in enumerate(rows):
        i, r, j = k // (2 * n_f), (k // n_f) % 2, k % n_f
        assert row["point"] == panel.points[i] and row["response"] == panel.responses[r]
        h1 = panel.h1[i, r, keep][j] * factor[j]
        h2 = panel.h2[i, r, keep][j] * factor[j]
        got = [float(row[c]) for c in ("freq_hz", "h1_re", "h1_im", "h2_re", "h2_im", "coherence")]
        want = [FREQ[keep][j], h1.real, h1.imag, h2.real, h2.imag, panel.coherence[i, r, keep][j]]
        assert got == [float(v) for v in want]


def test_quantities_follow_the_sdof_relations(tmp_path: Path) -> None:
    """Mobility and receptance exports equal the closed forms of one viscously damped mode.

    Source: for unit modal mass, receptance α(ω) = 1/(ω_n² − ω² + 2iζω_nω), mobility
    Y = iω·α, accelerance A = −ω²·α (Ewins, Modal Testing: Theory, Practice and
    Application, 2nd ed., 2000, §2.2, from memory), here in the e^{−iωt} transform
    convention of numpy's FFT under which d/dt ↔ iω. The 0 Hz line is dropped for
    mobility and receptance (undefined there) and kept for accelerance.
    """
    data = sdof()
    w_n, zeta = 2.0 * np.pi * 100.0, 0.02
    for quantity in ("accelerance", "mobility", "receptance"):
        out = export(data, tmp_path / f"{quantity}.npz", "npz", quantity)
        with np.load(out, allow_pickle=False) as z:
            f, h = z["freq"], z["H1"][0, 0]
            meta = json.loads(str(z["meta"]))
            assert meta["unit"] == UNITS[quantity]
            assert float(z["exp_tau_s"]) == math.inf and meta["exp_tau_s"] is None  # no window
        w = 2.0 * np.pi * f
        alpha = 1.0 / (w_n**2 - w**2 + 2j * zeta * w_n * w)
        want = {"accelerance": -(w**2) * alpha, "mobility": 1j * w * alpha, "receptance": alpha}
        np.testing.assert_allclose(h, want[quantity], rtol=1e-12, atol=0.0)
        assert (f[0] == 0.0) == (quantity == "accelerance")
    # at resonance the mobility is real and positive: 1/(2ζω_n) per unit modal mass
    k = int(np.argmin(np.abs(FREQ[1:] - 100.0)))
    with np.load(tmp_path / "mobility.npz", allow_pickle=False) as z:
        assert z["H1"][0, 0, k] == pytest.approx(1.0 / (2.0 * zeta * w_n), rel=1e-12)


@pytest.mark.parametrize(
    ("band", "message"),
    [((500.0, 100.0), r"band 500\.0:100\.0 Hz"), ((-1.0, 10.0), r"band -1\.0:10\.0 Hz"),
     ((float("nan"), 10.0), r"band nan:10\.0 Hz"), ((2001.0, 3000.0), "holds no frequency line"),
     (("a", "b"), "expected two frequencies")],
)  # fmt: skip
def test_bad_bands_name_the_band(
    panel: dataset.TestData, tmp_path: Path, band: tuple[float, float], message: str
) -> None:
    with pytest.raises(ValueError, match=message):
        export(panel, tmp_path / "x.npz", "npz", band=band)
    assert not list(tmp_path.iterdir())


def test_zero_band_has_no_mobility(panel: dataset.TestData, tmp_path: Path) -> None:
    with pytest.raises(ValueError, match="only the 0 Hz line"):
        export(panel, tmp_path / "x.csv", "csv", "mobility", (0.0, 1.0))
    out = export(panel, tmp_path / "x.csv", "csv", "accelerance", (0.0, 1.0))
    assert out.read_text(encoding="utf-8").count("\n") == 6 + len(panel.points) * 2


def test_bad_format_and_quantity(panel: dataset.TestData, tmp_path: Path) -> None:
    with pytest.raises(ValueError, match="format 'mat'; allowed: npz, hdf5, csv"):
        export(panel, tmp_path / "x.mat", "mat")
    with pytest.raises(ValueError, match="quantity 'inertance'"):
        export(panel, tmp_path / "x.npz", "npz", "inertance")
    assert not list(tmp_path.iterdir())


def test_missing_h5py_names_the_extra(
    panel: dataset.TestData, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setitem(sys.modules, "h5py", None)  # import h5py now raises ImportError
    with pytest.raises(ClientError, match=r"taprig\[hdf5\]") as caught:
        export(panel, tmp_path / "x.h5", "hdf5")
    assert "in a checkout of taprig: pip install '.[hdf5]'" in str(caught.value)
    assert not list(tmp_path.iterdir())
