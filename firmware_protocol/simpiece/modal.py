"""Modal model of the structure behind the simulated test piece.

A `ModalModel` holds what the simulated device needs to make accelerometer
signals: named points with coordinates, natural frequencies, modal damping
ratios and mass-normalised mode shapes at those points, the fixed sensor
locations and the tap grid. This module also builds such a model for a
simply supported Kirchhoff plate, provides the built-in demo structure (an
aluminium access panel) and reads/writes the "truth" JSON file that tests and
the demo compare identified modes against.
"""

from __future__ import annotations

import json
import math
import os
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "DEMO_DRIVING_POINT",
    "DampingSpec",
    "ModalModel",
    "demo_panel",
    "load_truth",
    "plate_modes",
    "plate_shapes",
    "simply_supported_plate",
    "truth_dict",
    "write_truth",
]

FloatArray = NDArray[np.float64]

#: Modal damping: one ratio for every mode, one ratio per mode (in frequency
#: order), or a function of the natural frequencies in Hz (shape (n_modes,)).
DampingSpec = float | Sequence[float] | FloatArray | Callable[[FloatArray], ArrayLike]

_UNITS = {"freq": "Hz", "shape": "kg^-1/2"}


def _frozen(values: ArrayLike, shape: tuple[int, ...], name: str) -> FloatArray:
    """Return a read-only float64 copy of `values`, checked to have `shape`."""
    arr = np.array(values, dtype=np.float64)
    if arr.shape != shape:
        raise ValueError(f"{name} has shape {arr.shape}, expected {shape}")
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} contains non-finite values")
    arr.flags.writeable = False
    return arr


@dataclass(frozen=True, eq=False)
class ModalModel:
    """Truncated modal model of a lightly damped structure.

    Attributes:
        labels: point labels, length n_points, unique.
        coords: point coordinates, shape (n_points, 3), metres.
        freqs_hz: undamped natural frequencies, shape (n_modes,), Hz, > 0.
        damping_ratio: viscous modal damping ratios, shape (n_modes,), each in
            (0, 1) (the closed-form response assumes underdamped modes).
        shapes: mass-normalised mode shapes, shape (n_points, n_modes),
            kg^-1/2 (so that the modal mass of every mode is 1).
        sensors: response label -> point label of the fixed accelerometers, in
            channel order. Sensor points may lie off the tap grid.
        grid: labels of the tap grid, a subset of `labels`, in tap order.
        structure: free-text description of the scenario.

    Arrays are stored as read-only copies; the instance is immutable.
    """

    labels: tuple[str, ...]
    coords: FloatArray
    freqs_hz: FloatArray
    damping_ratio: FloatArray
    shapes: FloatArray
    sensors: Mapping[str, str] = field(default_factory=dict)
    grid: tuple[str, ...] = ()
    structure: str = ""
    _index: Mapping[str, int] = field(init=False, repr=False)

    def __post_init__(self) -> None:
        labels = tuple(str(label) for label in self.labels)
        if len(set(labels)) != len(labels):
            raise ValueError("point labels must be unique")
        n_points = len(labels)
        n_modes = int(np.asarray(self.freqs_hz).size)
        freqs = _frozen(self.freqs_hz, (n_modes,), "freqs_hz")
        zeta = _frozen(self.damping_ratio, (n_modes,), "damping_ratio")
        if np.any(freqs <= 0.0):
            raise ValueError("natural frequencies must be positive")
        if np.any((zeta <= 0.0) | (zeta >= 1.0)):
            raise ValueError("damping ratios must lie strictly between 0 and 1")
        index = MappingProxyType({label: i for i, label in enumerate(labels)})
        sensors = MappingProxyType({str(k): str(v) for k, v in self.sensors.items()})
        for resp, point in sensors.items():
            if point not in index:
                raise ValueError(f"sensor {resp!r} sits on unknown point {point!r}")
        grid = tuple(str(label) for label in self.grid)
        unknown = [label for label in grid if label not in index]
        if unknown:
            raise ValueError(f"grid labels not among the points: {unknown}")
        if len(set(grid)) != len(grid):
            raise ValueError("grid labels must be unique")
        object.__setattr__(self, "labels", labels)
        object.__setattr__(self, "coords", _frozen(self.coords, (n_points, 3), "coords"))
        object.__setattr__(self, "freqs_hz", freqs)
        object.__setattr__(self, "damping_ratio", zeta)
        object.__setattr__(self, "shapes", _frozen(self.shapes, (n_points, n_modes), "shapes"))
        object.__setattr__(self, "sensors", sensors)
        object.__setattr__(self, "grid", grid)
        object.__setattr__(self, "_index", index)

    @property
    def n_points(self) -> int:
        """Number of points."""
        return len(self.labels)

    @property
    def n_modes(self) -> int:
        """Number of modes."""
        return int(self.freqs_hz.size)

    @property
    def omega(self) -> FloatArray:
        """Undamped natural angular frequencies, shape (n_modes,), rad/s."""
        return 2.0 * np.pi * self.freqs_hz

    def index(self, label: str) -> int:
        """Row of point `label` in `coords` and `shapes`; KeyError if unknown."""
        try:
            return self._index[label]
        except KeyError:
            raise KeyError(f"unknown point {label!r}") from None

    def shape_at(self, label: str) -> FloatArray:
        """Mode shape values at one point, shape (n_modes,), kg^-1/2."""
        row: FloatArray = self.shapes[self.index(label)]
        return row

    def shapes_at(self, labels: Sequence[str]) -> FloatArray:
        """Mode shape values at several points, shape (len(labels), n_modes), kg^-1/2."""
        rows = [self.index(label) for label in labels]
        return self.shapes[np.asarray(rows, dtype=np.intp).reshape(-1)]

    def driving_sensors(self) -> dict[str, str]:
        """Sensors mounted on a tap-grid point: response label -> grid label.

        Tapping that grid point gives a driving-point FRF for that sensor.
        """
        grid = set(self.grid)
        return {resp: point for resp, point in self.sensors.items() if point in grid}

    def sensor_places(self) -> dict[str, str]:
        """Where each sensor sits, as a rig is told it: response label -> the tap-grid label,
        or "x,y,z" (m) for a sensor off the tap grid. All sensors measure along +z."""
        grid = set(self.grid)
        return {
            resp: point if point in grid
            else ",".join(f"{c:g}" for c in self.coords[self.index(point)])
            for resp, point in self.sensors.items()
        }  # fmt: skip


# --------------------------------------------------------------------------
# Simply supported Kirchhoff plate
# --------------------------------------------------------------------------


def _flexural_speed(h: float, youngs_pa: float, poisson: float, density: float) -> float:
    """sqrt(D / (rho h)) in m^2/s, D = E h^3 / (12 (1 - nu^2)) the flexural rigidity."""
    rigidity = youngs_pa * h**3 / (12.0 * (1.0 - poisson**2))
    return math.sqrt(rigidity / (density * h))


def plate_modes(
    a: float,
    b: float,
    h: float,
    youngs_pa: float,
    poisson: float,
    density: float,
    f_max_hz: float,
) -> tuple[NDArray[np.int64], FloatArray]:
    """Mode orders and natural frequencies of a simply supported rectangular plate.

    omega_mn = pi^2 (m^2/a^2 + n^2/b^2) sqrt(D / (rho h)), D = E h^3/(12(1-nu^2))
    (Kirchhoff thin-plate theory, all four edges simply supported; Leissa,
    Vibration of Plates, NASA SP-160, 1969).

    Args:
        a, b: plate sides along x and y, m. h: thickness, m.
        youngs_pa: Young's modulus, Pa. poisson: Poisson ratio. density: kg/m^3.
        f_max_hz: keep every mode with f_mn <= f_max_hz.

    Returns:
        orders: shape (n_modes, 2), the half-wave numbers (m, n), m, n >= 1.
        freqs_hz: shape (n_modes,), ascending; ties are ordered by (m, n) so
            the order is deterministic.
    """
    for name, value in (
        ("a", a),
        ("b", b),
        ("h", h),
        ("youngs_pa", youngs_pa),
        ("density", density),
        ("f_max_hz", f_max_hz),
    ):
        if not value > 0.0:
            raise ValueError(f"{name} must be positive")
    if not -1.0 < poisson < 0.5:
        raise ValueError("poisson must lie in (-1, 0.5)")
    # f_mn = (pi/2) (m^2/a^2 + n^2/b^2) c, so m^2/a^2 + n^2/b^2 <= k2_max.
    c = _flexural_speed(h, youngs_pa, poisson, density)
    k2_max = f_max_hz / (0.5 * math.pi * c)
    m_top = max(math.floor(a * math.sqrt(k2_max)), 0)
    n_top = max(math.floor(b * math.sqrt(k2_max)), 0)
    m_grid, n_grid = np.meshgrid(np.arange(1, m_top + 1), np.arange(1, n_top + 1), indexing="ij")
    m = m_grid.ravel()
    n = n_grid.ravel()
    freqs = 0.5 * math.pi * c * (m**2 / a**2 + n**2 / b**2)
    keep = freqs <= f_max_hz
    m, n, freqs = m[keep], n[keep], freqs[keep]
    order = np.lexsort((n, m, freqs))
    orders = np.stack([m[order], n[order]], axis=1).astype(np.int64)
    return orders, freqs[order].astype(np.float64)


def plate_shapes(
    a: float,
    b: float,
    h: float,
    density: float,
    orders: ArrayLike,
    x: ArrayLike,
    y: ArrayLike,
) -> FloatArray:
    """Mass-normalised mode shapes of a simply supported rectangular plate.

    phi_mn(x, y) = 2 / sqrt(rho h a b) * sin(m pi x / a) * sin(n pi y / b), so
    that the integral of rho h phi^2 over the plate is 1 kg.

    Args:
        a, b, h: sides and thickness, m. density: kg/m^3.
        orders: (m, n) pairs, shape (n_modes, 2).
        x, y: point coordinates, m, broadcast to a common shape (n_pts,).

    Returns:
        Shape values, shape (n_pts, n_modes), kg^-1/2.
    """
    mn = np.asarray(orders, dtype=np.float64).reshape(-1, 2)
    xs, ys = np.broadcast_arrays(np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64))
    xs = xs.reshape(-1, 1)
    ys = ys.reshape(-1, 1)
    scale = 2.0 / math.sqrt(density * h * a * b)
    along_x = np.sin(mn[:, 0] * np.pi * xs / a)  # (n_pts, n_modes)
    along_y = np.sin(mn[:, 1] * np.pi * ys / b)
    shapes: FloatArray = scale * along_x * along_y
    return shapes


def _damping_for(spec: DampingSpec, freqs_hz: FloatArray) -> FloatArray:
    """Expand a damping specification to one ratio per mode, shape (n_modes,)."""
    if callable(spec):
        values = np.asarray(spec(freqs_hz.copy()), dtype=np.float64)
    else:
        values = np.asarray(spec, dtype=np.float64)
    if values.ndim == 0:
        values = np.full(freqs_hz.shape, float(values))
    if values.shape != freqs_hz.shape:
        raise ValueError(f"damping gives {values.shape} values for {freqs_hz.size} modes")
    return values


def simply_supported_plate(
    a: float,
    b: float,
    h: float,
    youngs_pa: float,
    poisson: float,
    density: float,
    damping_ratio: DampingSpec,
    f_max_hz: float,
    points: Mapping[str, tuple[float, float]],
    *,
    sensors: Mapping[str, str] | None = None,
    grid: Sequence[str] | None = None,
    structure: str = "",
) -> ModalModel:
    """Modal model of a rectangular Kirchhoff plate simply supported on all edges.

    The plate occupies 0 <= x <= a, 0 <= y <= b in the plane z = 0; all modes
    up to `f_max_hz` are kept, sorted by frequency (see `plate_modes`), with
    mass-normalised shapes (see `plate_shapes`).

    Args:
        a, b: plate sides along x and y, m. h: thickness, m.
        youngs_pa: Pa. poisson: dimensionless. density: kg/m^3.
        damping_ratio: modal damping, see `DampingSpec`; a sequence must give
            one ratio per kept mode in frequency order.
        f_max_hz: highest natural frequency kept, Hz.
        points: label -> (x, y) in m, inside the plate (edges allowed).
        sensors: response label -> point label of the fixed accelerometers.
        grid: tap-grid labels; default every point.
        structure: description stored in the model.
    """
    orders, freqs = plate_modes(a, b, h, youngs_pa, poisson, density, f_max_hz)
    if freqs.size == 0:
        raise ValueError("no plate mode lies below f_max_hz")
    labels = tuple(points)
    xy = np.array([points[label] for label in labels], dtype=np.float64).reshape(-1, 2)
    outside = (xy[:, 0] < 0.0) | (xy[:, 0] > a) | (xy[:, 1] < 0.0) | (xy[:, 1] > b)
    if np.any(outside):
        bad = [labels[i] for i in np.flatnonzero(outside)]
        raise ValueError(f"points outside the plate: {bad}")
    coords = np.column_stack([xy, np.zeros(len(labels))])
    return ModalModel(
        labels=labels,
        coords=coords,
        freqs_hz=freqs,
        damping_ratio=_damping_for(damping_ratio, freqs),
        shapes=plate_shapes(a, b, h, density, orders, xy[:, 0], xy[:, 1]),
        sensors=dict(sensors or {}),
        grid=tuple(grid) if grid is not None else labels,
        structure=structure,
    )


# --------------------------------------------------------------------------
# Built-in demo structure
# --------------------------------------------------------------------------

# Aluminium 6061-T6: handbook values from memory.
_AL_YOUNGS_PA = 69e9
_AL_POISSON = 0.33
_AL_DENSITY = 2700.0

# Access panel 600 mm x 400 mm x 3 mm, simply supported in a test frame.
_PANEL_A = 0.60
_PANEL_B = 0.40
_PANEL_H = 0.003

_GRID_ROWS = "ABCDE"  # along y
_GRID_COLS = 6  # along x

#: Grid point that carries accelerometer acc1 in the demo panel: tapping it
#: gives the driving-point FRF.
DEMO_DRIVING_POINT = "B3"


def _demo_damping(freqs_hz: FloatArray) -> FloatArray:
    """Damping ratio of the demo panel, 0.8 % at 0 Hz rising to 1.2 % at 5 kHz.

    About 1 % is common practice for a light aluminium panel in a frame; the
    gentle rise with frequency stands for joint and air losses.
    """
    return 0.008 + 0.004 * np.asarray(freqs_hz, dtype=np.float64) / 5000.0


def demo_panel(f_max_hz: float = 5000.0) -> ModalModel:
    """The built-in demo structure: an aluminium access panel in a test frame.

    600 x 400 x 3 mm aluminium plate, simply supported on all four edges
    (f11 is about 66 Hz), damping about 1 %. Tap grid: 5 rows "A".."E" along
    y by 6 columns "1".."6" along x, labels "A1".."E6", cell-centred so no
    grid point lies on an edge (x = 50, 150, ..., 550 mm; y = 40, 120, ...,
    360 mm). Accelerometer "acc1" sits on grid point B3 (x 250 mm, y 120 mm;
    the driving point, see `DEMO_DRIVING_POINT`); "acc2" sits on the off-grid
    point "X1" (x 467 mm, y 328 mm). Both sit off the nodal lines of every
    mode with m < 12 and n < 10, and clear of those of the first 30 modes
    (up to about 1.4 kHz). Accelerometer mass loading is neglected.

    Args:
        f_max_hz: highest natural frequency kept, Hz (about 117 modes at 5 kHz).
    """
    points: dict[str, tuple[float, float]] = {}
    for row_i, row in enumerate(_GRID_ROWS):
        for col_i in range(_GRID_COLS):
            x = (col_i + 0.5) * _PANEL_A / _GRID_COLS
            y = (row_i + 0.5) * _PANEL_B / len(_GRID_ROWS)
            points[f"{row}{col_i + 1}"] = (round(x, 6), round(y, 6))
    grid = tuple(points)
    # Off-grid accelerometer site, chosen well clear of the nodal lines of the
    # first 30 modes (|sin sin| >= 0.17 there); x/a = 467/600 and y/b = 41/50,
    # so the first nodal lines exactly through it belong to m = 600 or n = 50.
    points["X1"] = (0.467, 0.328)
    structure = (
        "Aluminium access panel 600 mm x 400 mm x 3 mm (E 69 GPa, nu 0.33, "
        "rho 2700 kg/m^3), simply supported on all four edges in a test frame; "
        "tap grid A1..E6 (5 rows x 6 columns, cell-centred); accelerometers acc1 "
        f"on grid point {DEMO_DRIVING_POINT} and acc2 on off-grid point X1."
    )
    return simply_supported_plate(
        _PANEL_A,
        _PANEL_B,
        _PANEL_H,
        _AL_YOUNGS_PA,
        _AL_POISSON,
        _AL_DENSITY,
        _demo_damping,
        f_max_hz,
        points,
        sensors={"acc1": DEMO_DRIVING_POINT, "acc2": "X1"},
        grid=grid,
        structure=structure,
    )


# --------------------------------------------------------------------------
# Truth file
# --------------------------------------------------------------------------


def truth_dict(model: ModalModel) -> dict[str, Any]:
    """The model as a JSON-ready dict (the truth-file layout).

    Layout: {"units": {"freq": "Hz", "shape": "kg^-1/2"}, "structure": str,
    "points": {label: [x, y, z]} (m), "grid": [label, ...],
    "sensors": {response label: point label}, "modes": [{"freq_hz": f,
    "damping_ratio": zeta, "shape": {point label: value}}, ...]}.
    """
    return {
        "units": dict(_UNITS),
        "structure": model.structure,
        "points": {
            label: [float(v) for v in model.coords[i]] for i, label in enumerate(model.labels)
        },
        "grid": list(model.grid),
        "sensors": dict(model.sensors),
        "modes": [
            {
                "freq_hz": float(model.freqs_hz[r]),
                "damping_ratio": float(model.damping_ratio[r]),
                "shape": {label: float(model.shapes[i, r]) for i, label in enumerate(model.labels)},
            }
            for r in range(model.n_modes)
        ],
    }


def write_truth(model: ModalModel, path: str | os.PathLike[str]) -> None:
    """Write the truth JSON file of `model` (layout: see `truth_dict`)."""
    with open(path, "w", encoding="utf-8") as fh:
        json.dump(truth_dict(model), fh, indent=1)
        fh.write("\n")


def load_truth(path: str | os.PathLike[str]) -> ModalModel:
    """Read a truth JSON file back into a `ModalModel` (exact round trip).

    "grid" defaults to every point and "structure" to "" when absent.
    """
    with open(path, encoding="utf-8") as fh:
        data = json.load(fh)
    units = data.get("units", _UNITS)
    if units != _UNITS:
        raise ValueError(f"unsupported units {units!r}, expected {_UNITS!r}")
    points: dict[str, list[float]] = data["points"]
    labels = tuple(points)
    modes: list[dict[str, Any]] = data["modes"]
    shapes = np.array(
        [[float(mode["shape"][label]) for mode in modes] for label in labels], dtype=np.float64
    ).reshape(len(labels), len(modes))
    return ModalModel(
        labels=labels,
        coords=np.array([points[label] for label in labels], dtype=np.float64).reshape(-1, 3),
        freqs_hz=np.array([float(mode["freq_hz"]) for mode in modes], dtype=np.float64),
        damping_ratio=np.array([float(mode["damping_ratio"]) for mode in modes], dtype=np.float64),
        shapes=shapes,
        sensors=dict(data.get("sensors", {})),
        grid=tuple(data.get("grid", labels)),
        structure=str(data.get("structure", "")),
    )
