"""Export one test's FRFs for fitting elsewhere: npz, HDF5 or CSV.

Entry point: ``export(data, path, fmt, quantity="accelerance", band=None) -> Path``, fed a
`TestData` (client/dataset.py). Pure: no HTTP, no SQLite; it writes one file.

Every format carries the same names (P points, R responses, F frequency lines):

=============  ==========  ==========  ====================================================
name           shape       dtype       meaning / unit
=============  ==========  ==========  ====================================================
freq           (F,)        float64     Hz
H1, H2         (P, R, F)   complex128  FRF in the exported quantity (see ``meta.unit``)
coherence      (P, R, F)   float64     1
point          (P,)        unicode     grid point label of each row
coord          (P, 3)      float64     m, x y z of each row's point
direction      (P,)        unicode     "+z" ...: the direction measured at each row's point
response       (R,)        unicode     sensor channel labels
n_averages     (P,)        int64       accepted hits per point set
exp_tau_s      ()          float64     exponential window time constant, s (inf: none);
                                       H1/H2 carry its added decay 1/tau: σ_true =
                                       σ_measured − 1/tau (``meta.exponential_window``)
meta           ()          unicode     JSON (NaN, inf as null): the point sets' metadata
                                       (rig, test, sample rate, block, windows, channels
                                       and sensitivities, device), plus quantity, unit,
                                       band_hz, roving mode, reference, drive and response
                                       points, rejections, and per row the point-set id,
                                       version and seq; coverage ("15 of 30 points") and
                                       unmeasured_points; sensors (each response's place)
geometry       ()          unicode     JSON (npz and HDF5): the structure's points (label,
                                       xyz m, direction vector), faces (name, triangles
                                       of point indices, unit normal) and lines: the
                                       test's outline over its grid, else the grid alone
                                       (client/view/geometry.py, Geometry.to_dict)
=============  ==========  ==========  ====================================================

* npz: ``numpy.savez``, uncompressed: measured FRF floats compress only to about 0.6 of
  their size, at several times the write time (tests/bench/bench_client.py). Strings are
  numpy unicode arrays, so ``numpy.load(path, allow_pickle=False)`` reads every key.
* HDF5 (optional extra ``hdf5``: ``pip install 'taprig[hdf5]'``): one dataset per name
  (strings as UTF-8), and the root attributes ``quantity``, ``unit`` and ``meta``.
* CSV: ``#`` comment lines first (test, quantity, unit, exp_tau_s, meta JSON), then a
  header and one row per frequency line per point per response:
  ``point,direction,response,freq_hz,h1_re,h1_im,h2_re,h2_im,coherence``. Floats are
  written with ``repr``, the shortest text that reads back to the same float.

Quantities. The rig measures accelerance A, (m/s²)/N. With the e^{iωt} time dependence of
a harmonic response, velocity is acceleration/(iω) and displacement acceleration/(−ω²), so
mobility Y = A/(iω), (m/s)/N, and receptance α = A/(−ω²), m/N (Ewins, Modal Testing:
Theory, Practice and Application, 2nd ed., 2000, §1.3 and §2.2, from memory). Phase
convention: the rig's spectra use numpy's forward FFT, X(ω) = Σ x e^{−iωt}, under which
d/dt ↔ iω, so the same division holds. At f = 0 the division is undefined: mobility and
receptance exports drop the 0 Hz line (a fitter gets only lines with a value, no NaN).
Coherence is a ratio of spectra and is the same for every quantity.

Hit records. The exports carry the FRFs, not the hits' raw records, so they did not change
when the records became device codes (schema 3). A reader who wants a record takes it from
the mirror in SI units (N, m/s²) with ``hit.si()``: ``data × scale``, the one conversion
(`taprig.schema.pointset.hit_si`); ``data`` alone is in device counts.

Band: ``band=(F1, F2)`` keeps the lines with F1 <= f <= F2 (Hz); a band that is not two
finite numbers 0 <= F1 < F2, or holds no line, is a ValueError naming the band.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
from pathlib import Path
from typing import Any, Literal

import numpy as np

from .dataset import TestData, jsonable
from .errors import ClientError
from .words import extra_hint

__all__ = ["FORMATS", "QUANTITIES", "UNITS", "export", "frf_arrays", "geometry_json", "meta_json"]

Format = Literal["npz", "hdf5", "csv"]
Quantity = Literal["accelerance", "mobility", "receptance"]

FORMATS: tuple[str, ...] = ("npz", "hdf5", "csv")
QUANTITIES: tuple[str, ...] = ("accelerance", "mobility", "receptance")
#: Unit of each quantity, ASCII so that every tool reads it.
UNITS: dict[str, str] = {
    "accelerance": "(m/s^2)/N",
    "mobility": "(m/s)/N",
    "receptance": "m/N",
}
_CSV_COLUMNS = (
    "point", "direction", "response", "freq_hz",
    "h1_re", "h1_im", "h2_re", "h2_im", "coherence",
)  # fmt: skip


def export(
    data: TestData,
    path: str | os.PathLike[str],
    fmt: Format | str,
    quantity: Quantity | str = "accelerance",
    band: tuple[float, float] | None = None,
) -> Path:
    """Write `data` to `path` as `fmt` ("npz", "hdf5" or "csv") and return the path.

    quantity: "accelerance" ((m/s²)/N, as measured), "mobility" ((m/s)/N) or
    "receptance" (m/N); the latter two drop the 0 Hz line. band: (F1, F2) in Hz, keep
    F1 <= f <= F2; None keeps every line. The file is written to a temporary name
    beside `path` and renamed, so a failed export leaves no half-written file.
    """
    if fmt not in FORMATS:
        raise ValueError(f"format {fmt!r}; allowed: {', '.join(FORMATS)}")
    arrays = frf_arrays(data, quantity, band)
    out = Path(path)
    tmp = out.with_name(f".{out.name}.part")
    try:
        if fmt == "npz":
            _write_npz(data, arrays, tmp)
        elif fmt == "hdf5":
            _write_hdf5(data, arrays, tmp)
        else:
            _write_csv(data, arrays, tmp)
        os.replace(tmp, out)
    finally:
        tmp.unlink(missing_ok=True)
    return out


def frf_arrays(
    data: TestData,
    quantity: Quantity | str = "accelerance",
    band: tuple[float, float] | None = None,
) -> dict[str, Any]:
    """The exported arrays: freq (F',), H1, H2, coherence (P, R, F') and the meta JSON.

    F' are the lines kept by `band` (and, for mobility and receptance, without 0 Hz).
    """
    if quantity not in QUANTITIES:
        raise ValueError(f"quantity {quantity!r}; allowed: {', '.join(QUANTITIES)}")
    freq = data.freq_hz
    keep = _band_lines(freq, band)
    if quantity != "accelerance":
        keep &= freq != 0.0
        if not keep.any():
            raise ValueError(f"band {_band_text(band)}: only the 0 Hz line, no {quantity}")
    f = freq[keep]
    omega = 2.0 * np.pi * f
    if quantity == "mobility":
        factor = 1.0 / (1j * omega)
    elif quantity == "receptance":
        factor = (-1.0 / omega**2).astype(np.complex128)
    else:
        factor = np.ones(f.shape, dtype=np.complex128)
    return {
        "freq": f,
        "H1": data.h1[..., keep] * factor,
        "H2": data.h2[..., keep] * factor,
        "coherence": data.coherence[..., keep],
        "meta": meta_json(data, str(quantity), band),
    }


WINDOW_NOTE = (
    "H1 and H2 are computed from records multiplied by an exponential window "
    "exp(-t/exp_tau_s) (force and responses alike, from the trigger on), so every mode carries "
    "the window's added decay rate 1/exp_tau_s (exp_decay_per_s, 1/s). To remove it from a "
    "fitted pole: sigma_true = sigma_measured - 1/exp_tau_s, where sigma = zeta*omega_n; "
    "for damping ratios zeta_true = zeta_measured - 1/(2*pi*f_n*exp_tau_s)"
)


def meta_json(data: TestData, quantity: str, band: tuple[float, float] | None) -> str:
    """The export's metadata as one JSON text (NaN and inf written as null)."""
    meta = {
        **data.meta,
        "quantity": quantity,
        "unit": UNITS[quantity],
        "band_hz": list(band) if band is not None else None,
        "roving_mode": data.roving_mode,
        "reference": data.reference,
        "exp_tau_s": data.exp_tau_s,
        "drive_points": list(data.drive_points),
        "response_points": [list(p) for p in data.response_points],
        "rejections": list(data.rejections),
        "point_set_ids": list(data.point_set_ids),
        "versions": list(data.versions),
        "seqs": list(data.seqs),
        "completed_utc": list(data.completed_utc),
        "planned_averages": data.planned_averages,
        "coverage": data.coverage,
        "points_measured": len(data.points),
        "points_in_grid": len(data.grid),
        "unmeasured_points": list(data.unmeasured),
        "exp_decay_per_s": 0.0 if math.isinf(data.exp_tau_s) else 1.0 / data.exp_tau_s,
        "exponential_window": WINDOW_NOTE,
    }
    return json.dumps(jsonable(meta), sort_keys=True, allow_nan=False)


def _band_text(band: tuple[float, float] | None) -> str:
    return "all" if band is None else f"{band[0]!r}:{band[1]!r} Hz"


def _band_lines(freq: np.ndarray, band: tuple[float, float] | None) -> np.ndarray:
    """Boolean mask of the lines F1 <= f <= F2; ValueError naming a bad band."""
    if band is None:
        mask: np.ndarray = np.ones(freq.shape, dtype=bool)
        return mask
    try:
        f1, f2 = (float(v) for v in band)
    except (TypeError, ValueError):
        raise ValueError(f"band {band!r}: expected two frequencies F1, F2 in Hz") from None
    if not (math.isfinite(f1) and math.isfinite(f2) and 0.0 <= f1 < f2):
        raise ValueError(f"band {f1!r}:{f2!r} Hz: need finite 0 <= F1 < F2")
    keep: np.ndarray = (freq >= f1) & (freq <= f2)
    if not keep.any():
        raise ValueError(
            f"band {f1!r}:{f2!r} Hz holds no frequency line "
            f"(lines run {float(freq[0])!r} to {float(freq[-1])!r} Hz)"
        )
    return keep


def _common(data: TestData) -> dict[str, np.ndarray]:
    """The per-row and per-response arrays every format stores, strings as unicode."""
    return {
        "point": np.array(data.points, dtype=np.str_),
        "coord": np.asarray(data.coords, dtype=np.float64),
        "direction": np.array(data.directions, dtype=np.str_),
        "response": np.array(data.responses, dtype=np.str_),
        "n_averages": np.asarray(data.n_averages, dtype=np.int64),
        "exp_tau_s": np.array(data.exp_tau_s, dtype=np.float64),
    }


def geometry_json(data: TestData) -> str:
    """The test's geometry as one JSON text (its outline over its grid, else the grid)."""
    from .view.outline import geometry_of

    return json.dumps(geometry_of(data).to_dict(), sort_keys=True, allow_nan=False)


def _write_npz(data: TestData, arrays: dict[str, Any], path: Path) -> None:
    # Typed as Any: numpy's stub also has a bool keyword (allow_pickle) among the names.
    named: dict[str, Any] = {
        "freq": arrays["freq"],
        "H1": arrays["H1"],
        "H2": arrays["H2"],
        "coherence": arrays["coherence"],
        "meta": np.array(arrays["meta"], dtype=np.str_),
        "geometry": np.array(geometry_json(data), dtype=np.str_),
        **_common(data),
    }
    with open(path, "wb") as fh:
        np.savez(fh, **named)


def _write_hdf5(data: TestData, arrays: dict[str, Any], path: Path) -> None:
    try:
        import h5py
    except ImportError:
        raise ClientError(
            f"HDF5 export needs h5py: install the extra with  {extra_hint('hdf5')}"
        ) from None
    text = h5py.string_dtype("utf-8")
    meta = json.loads(arrays["meta"])
    with h5py.File(path, "w") as fh:
        for name in ("freq", "H1", "H2", "coherence"):
            fh.create_dataset(name, data=arrays[name])
        for name, value in _common(data).items():
            if value.dtype.kind == "U":
                fh.create_dataset(name, data=value.astype(object), dtype=text)
            else:
                fh.create_dataset(name, data=value)
        fh.create_dataset("meta", data=arrays["meta"], dtype=text)
        fh.create_dataset("geometry", data=geometry_json(data), dtype=text)
        fh.attrs["quantity"] = meta["quantity"]
        fh.attrs["unit"] = meta["unit"]
        fh.attrs["meta"] = arrays["meta"]


def _write_csv(data: TestData, arrays: dict[str, Any], path: Path) -> None:
    meta = json.loads(arrays["meta"])
    freq = [repr(float(f)) for f in arrays["freq"]]
    h1, h2, coh = arrays["H1"], arrays["H2"], arrays["coherence"]
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write(f"# taprig export of test {data.test!r} from rig {data.rig!r}\n")
        fh.write(f"# quantity: {meta['quantity']}; unit: {meta['unit']}\n")
        fh.write(f"# points: {data.coverage} measured\n")
        fh.write(f"# exp_tau_s: {data.exp_tau_s!r} (H1, H2 carry the added decay 1/tau; "
                 "sigma_true = sigma_measured - 1/tau)\n")
        fh.write(f"# meta: {arrays['meta']}\n")
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow(_CSV_COLUMNS)
        for i, point in enumerate(data.points):
            for r, response in enumerate(data.responses):
                # Converting whole rows with tolist() first keeps repr on Python floats.
                buf = io.StringIO()
                rows = zip(
                    freq,
                    h1[i, r].real.tolist(), h1[i, r].imag.tolist(),
                    h2[i, r].real.tolist(), h2[i, r].imag.tolist(),
                    coh[i, r].tolist(), strict=True,
                )  # fmt: skip
                prefix = _csv_prefix(point, data.directions[i], response)
                for f, a, b, c, d, g in rows:
                    buf.write(f"{prefix}{f},{a!r},{b!r},{c!r},{d!r},{g!r}\n")
                fh.write(buf.getvalue())


def _csv_prefix(*labels: str) -> str:
    """The label columns of a CSV row, quoted by the csv module where needed, and a comma."""
    buf = io.StringIO()
    csv.writer(buf, lineterminator="").writerow([*labels, ""])
    return buf.getvalue()
