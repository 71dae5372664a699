"""`ModalModel`: what a fit found, with its evidence, and its files (npz, HDF5, JSON).

One record declares every array of a fitted test once; `save` and `load` write and read
the same keys in npz and HDF5 (h5py, the ``hdf5`` extra), and `to_dict` gives the JSON of
``taprig fit --json``. Complex arrays are stored as complex; labels and flags as strings
(a mode's flags joined by commas); `meta` as one JSON string.
"""

from __future__ import annotations

import io
import json
import math
import os
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

__all__ = ["ModalModel", "ModelFileError"]

FloatArray = NDArray[np.float64]
ComplexArray = NDArray[np.complex128]
IntArray = NDArray[np.int64]

_STRINGS = ("point", "reference", "scaling")
_JSON = ("meta", "geometry")
_OPTIONAL = ("geometry",)  # files written before the field existed read without it


class ModelFileError(ValueError):
    """A modal model file that cannot be written or read back."""


@dataclass(frozen=True, slots=True, eq=False)
class ModalModel:
    """The modes of one test: M modes, P points (outputs), R references, F lines.

    ========================  =========  ====================================================
    field                     shape      meaning, unit
    ========================  =========  ====================================================
    freq_hz                   (M,)       undamped natural frequency |λ|/2π, window removed, Hz
    damping_ratio             (M,)       ζ = σ/|λ|, the window's 1/τ removed from σ
    damping_ratio_windowed    (M,)       ζ of the pole as fitted (window included)
    shape                     (M, P)     complex mode shape (see `scaling`)
    point                     (P,)       output labels (grid points; point/sensor if several)
    reference                 (R,)       reference labels (sensors, or the hammer's point)
    participation             (M, R)     complex participation vector (see lsfd.Shapes)
    mac                       (M, M)     auto-MAC of the shapes
    mpc                       (M,)       modal phase collinearity of each shape
    synthesis_error           (M,)       relative synthesis error near each mode
    synthesis_error_point     (P,)       relative synthesis error of each point over the band
    flags                     (M,)       flag codes of each mode (quality.py)
    scaling                   (M,)       "unit modal mass" or "unit norm"
    diagram_order             (N,)       stabilization diagram: model order of each pole
    diagram_freq_hz           (N,)       ... its natural frequency, Hz (window included)
    diagram_damping_ratio     (N,)       ... its damping ratio (window included)
    diagram_status            (N,)       ... stability bits (stability.py)
    synth_freq_hz             (F,)       lines of the fit, Hz
    measured                  (P, R, F)  the accelerance fitted, (m/s²)/N
    synthesized               (P, R, F)  the model's accelerance, (m/s²)/N
    meta                      JSON       test, band, orders, tolerances, τ, scaling, notes
    geometry                  JSON       the test's geometry (Geometry.to_dict of client/view:
                                         points, faces, lines) or null; optional in files
    ========================  =========  ====================================================
    """

    freq_hz: FloatArray
    damping_ratio: FloatArray
    damping_ratio_windowed: FloatArray
    shape: ComplexArray
    point: tuple[str, ...]
    reference: tuple[str, ...]
    participation: ComplexArray
    mac: FloatArray
    mpc: FloatArray
    synthesis_error: FloatArray
    synthesis_error_point: FloatArray
    flags: tuple[tuple[str, ...], ...]
    scaling: tuple[str, ...]
    diagram_order: IntArray
    diagram_freq_hz: FloatArray
    diagram_damping_ratio: FloatArray
    diagram_status: IntArray
    synth_freq_hz: FloatArray
    measured: ComplexArray
    synthesized: ComplexArray
    meta: dict[str, Any] = field(default_factory=dict)
    geometry: dict[str, Any] | None = None

    @property
    def n_modes(self) -> int:
        return int(self.freq_hz.size)

    def modes(self) -> list[dict[str, Any]]:
        """One JSON-ready row per mode."""
        return [
            {
                "freq_hz": float(self.freq_hz[k]),
                "damping_ratio": _finite(self.damping_ratio[k]),
                "damping_ratio_windowed": float(self.damping_ratio_windowed[k]),
                "mpc": float(self.mpc[k]),
                "synthesis_error": _finite(self.synthesis_error[k]),
                "flags": list(self.flags[k]),
                "scaling": self.scaling[k],
                "participation": [float(v) for v in np.abs(self.participation[k])],
            }
            for k in range(self.n_modes)
        ]

    def to_dict(self) -> dict[str, Any]:
        """The JSON of ``taprig fit --json``: modes, labels, MAC, meta (NaN → None)."""
        return {
            "modes": self.modes(),
            "point": list(self.point),
            "reference": list(self.reference),
            "mac": [[round(float(v), 6) for v in row] for row in self.mac],
            "meta": self.meta,
        }

    def save(self, path: str | os.PathLike[str]) -> Path:
        """Write the model to `path`: .npz, or .h5/.hdf5 (h5py); returns the path."""
        path = Path(path)
        arrays = self._arrays()
        suffix = path.suffix.lower()
        try:
            if suffix == ".npz":
                path.write_bytes(self.npz_bytes())
            elif suffix in (".h5", ".hdf5"):
                h5py = _h5py()
                with h5py.File(path, "w") as f:
                    for key, value in arrays.items():
                        if value.dtype.kind == "U":
                            f.create_dataset(key, data=value.astype(object),
                                             dtype=h5py.string_dtype())  # fmt: skip
                        else:
                            f.create_dataset(key, data=value)
            else:
                raise ModelFileError(f"{path}: write a .npz or .h5 file")
        except OSError as exc:
            raise ModelFileError(f"{path}: {exc.strerror or exc}") from None
        return path

    def npz_bytes(self) -> bytes:
        """The model as the bytes of its .npz file (what `save` writes; the archive keeps it)."""
        buffer = io.BytesIO()
        np.savez_compressed(buffer, **self._arrays())  # type: ignore[arg-type]
        return buffer.getvalue()

    @classmethod
    def load(cls, path: str | os.PathLike[str]) -> ModalModel:
        """Read a model written by `save`."""
        path = Path(path)
        suffix = path.suffix.lower()
        try:
            if suffix == ".npz":
                with np.load(path, allow_pickle=False) as z:
                    arrays = {k: z[k] for k in z.files}
            elif suffix in (".h5", ".hdf5"):
                with _h5py().File(path, "r") as f:
                    arrays = {k: _h5_value(f[k]) for k in f}
            else:
                raise ModelFileError(f"{path}: read a .npz or .h5 file")
        except OSError as exc:
            raise ModelFileError(f"{path}: {exc.strerror or exc}") from None
        return cls._from_arrays(arrays, path)

    def _arrays(self) -> dict[str, np.ndarray]:
        out: dict[str, np.ndarray] = {}
        for f in fields(self):
            value = getattr(self, f.name)
            if f.name in _JSON:
                out[f.name] = np.array(json.dumps(value, default=str))
            elif f.name == "flags":
                out[f.name] = np.array([",".join(v) for v in value], dtype=str).reshape(-1)
            elif f.name in _STRINGS:
                out[f.name] = np.array(value, dtype=str).reshape(-1)
            else:
                out[f.name] = np.asarray(value)
        return out

    @classmethod
    def _from_arrays(cls, arrays: dict[str, np.ndarray], path: Path) -> ModalModel:
        missing = [f.name for f in fields(cls) if f.name not in arrays and f.name not in _OPTIONAL]
        if missing:
            raise ModelFileError(f"{path}: not a modal model (missing {', '.join(missing)})")
        kw: dict[str, Any] = {}
        for f in fields(cls):
            if f.name not in arrays:  # an optional field a file written before it lacks
                continue
            value = arrays[f.name]
            if f.name in _JSON:
                kw[f.name] = json.loads(str(value))
            elif f.name == "flags":
                kw[f.name] = tuple(tuple(c for c in str(v).split(",") if c) for v in value)
            elif f.name in _STRINGS:
                kw[f.name] = tuple(str(v) for v in value)
            else:
                kw[f.name] = np.asarray(value)
        return cls(**kw)


def _finite(value: float) -> float | None:
    return float(value) if math.isfinite(float(value)) else None


def _h5py() -> Any:
    try:
        import h5py
    except ImportError:
        raise ModelFileError("HDF5 needs h5py: pip install 'taprig[hdf5]' (in a checkout of "
                             "taprig: pip install '.[hdf5]')") from None
    return h5py


def _h5_value(dataset: Any) -> np.ndarray:
    value = dataset[()]
    if isinstance(value, bytes):
        return np.array(value.decode("utf-8"))
    if isinstance(value, np.ndarray) and value.dtype == object:
        texts = [v.decode("utf-8") if isinstance(v, bytes) else v for v in value]
        return np.array(texts, dtype=str)
    return np.asarray(value)
