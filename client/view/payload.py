"""The page's data as JSON-able dicts, built by pure functions (no HTTP here).

* `page_data(data, modes, geometry)`: everything the page opens with: the test, the
  frequency lines, the summed FRF and mean coherence, the geometry and its flat layout,
  the modes (shapes normalised, over the geometry's points), MAC and the poles.
* `point_frf(data, row)`: one point's FRFs (magnitude, phase, coherence per response),
  fetched when the user picks the point: all points' FRFs at once would be tens of MB.
* `deflection(data, geometry, line)`: the operating deflection shape at one frequency line.

Shapes sent to the page are normalised by `normalise`: divided by the component of largest
magnitude and multiplied by its magnitude over the largest, so that component is real and
positive and the largest magnitude is 1 (a complex scale changes nothing a mode shape says).
Points of the geometry that were not measured get 0 and are listed in `unmeasured`.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..dataset import TestData, jsonable
from .geometry import Geometry
from .modes import ModeSet
from .unfold import unfold

__all__ = ["AMPLITUDE_SHARE", "deflection", "normalise", "page_data", "point_frf", "spread"]

AMPLITUDE_SHARE = 0.08  # a unit shape's largest displacement, as a share of the structure's size
ComplexArray = NDArray[np.complex128]


def normalise(shape: ComplexArray) -> ComplexArray:
    """Rows of `shape` (M, P) scaled so each row's largest component is 1 (real, positive)."""
    phi = np.atleast_2d(np.asarray(shape, dtype=np.complex128))
    big = phi[np.arange(len(phi)), np.argmax(np.abs(phi), axis=1)]
    big = np.where(big == 0, 1.0, big)
    out: ComplexArray = phi / big[:, None]
    return out


def spread(shape: ComplexArray, rows: tuple[str, ...], geometry: Geometry) -> ComplexArray:
    """Shapes (M, P) over data rows `rows` → (M, G) over the geometry's points (0 where the
    geometry has a point no row measured)."""
    at = {p: i for i, p in enumerate(rows)}
    phi = np.atleast_2d(shape)
    out = np.zeros((len(phi), len(geometry.labels)), dtype=np.complex128)
    for g, label in enumerate(geometry.labels):
        if label in at:
            out[:, g] = phi[:, at[label]]
    return out


def _list(a: NDArray[Any], digits: int) -> list[float]:
    return [float(v) for v in np.round(np.asarray(a, dtype=np.float64), digits)]


def _db(a: NDArray[Any]) -> NDArray[np.float64]:
    with np.errstate(divide="ignore"):
        out: NDArray[np.float64] = 20.0 * np.log10(np.maximum(np.abs(a), 1e-30))
    return out


def _complex(phi: ComplexArray) -> dict[str, list[float]]:
    return {"re": _list(phi.real, 7), "im": _list(phi.imag, 7)}


def _test_info(data: TestData) -> dict[str, Any]:
    done = sorted(t for t in data.completed_utc if t)
    return {"name": data.test, "rig": data.rig, "roving_mode": data.roving_mode,
            "reference": data.reference, "responses": list(data.responses),
            "points": list(data.points), "date": done[-1][:10] if done else "",
            "unit": "(m/s²)/N"}  # fmt: skip


def page_data(data: TestData, modes: ModeSet, geometry: Geometry) -> dict[str, Any]:
    """The page's opening data (module docstring); plain JSON types, NaN as null."""
    flat = unfold(geometry)
    summed = np.abs(data.h1).sum(axis=(0, 1))
    shapes = normalise(spread(modes.shape, modes.point, geometry))
    measured = set(data.points)
    out: dict[str, Any] = jsonable({
        "test": _test_info(data),
        "freq_hz": _list(data.freq_hz, 4),
        "summed_db": _list(_db(summed), 3),
        "coherence": _list(data.coherence.mean(axis=(0, 1)), 4),
        "geometry": geometry.to_dict(),
        "flat": {"vertices": _list(flat.vertices.ravel(), 7), "point": flat.point.tolist(),
                 "triangles": flat.triangles.ravel().tolist(),
                 "normal": _list(flat.normal.ravel(), 7)},
        "unmeasured": [g for g, p in enumerate(geometry.labels) if p not in measured],
        "scale_m": AMPLITUDE_SHARE * geometry.size_m,
        "modes": {
            "source": modes.source, "label": modes.label,
            "list": [
                {"freq_hz": float(modes.freq_hz[m]), "damping_ratio": float(modes.damping_ratio[m]),
                 "mpc": float(modes.mpc[m]), "flags": list(modes.flags[m]),
                 "shape": _complex(shapes[m])}
                for m in range(len(modes))
            ],
            "mac": [_list(row, 4) for row in modes.mac],
            "poles": [{"order": r.order, "freq_hz": _list(r.freq_hz, 4),
                       "damping": _list(r.damping, 6), "stable": r.stable.tolist()}
                      for r in modes.poles],
        },
    })  # fmt: skip
    return out


def point_frf(data: TestData, row: int) -> dict[str, Any]:
    """Row `row`'s H1 per response: magnitude in dB re 1 (m/s²)/N, phase in degrees,
    coherence. IndexError when there is no such row."""
    if not 0 <= row < len(data.points):
        raise IndexError(f"no point row {row}; the test has {len(data.points)}")
    h = data.h1[row]
    out: dict[str, Any] = jsonable({
        "point": data.points[row],
        "responses": [
            {"label": r, "mag_db": _list(_db(h[k]), 3),
             "phase_deg": _list(np.degrees(np.angle(h[k])), 2),
             "coherence": _list(data.coherence[row, k], 4)}
            for k, r in enumerate(data.responses)
        ],
    })  # fmt: skip
    return out


def deflection(data: TestData, geometry: Geometry, line: int) -> dict[str, Any]:
    """The operating deflection shape at frequency line `line`: H1 over the points for the
    response that moves most there (largest Σ|H1| over points), normalised as the modes,
    over the geometry's points. IndexError when there is no such line."""
    if not 0 <= line < data.freq_hz.size:
        raise IndexError(f"no frequency line {line}; the test has {data.freq_hz.size}")
    h = data.h1[:, :, line]  # (P, R)
    k = int(np.argmax(np.abs(h).sum(axis=0)))
    phi = normalise(spread(h[:, k][None, :], data.points, geometry))[0]
    f = float(data.freq_hz[line])
    return {"line": line, "freq_hz": f if math.isfinite(f) else None,
            "response": data.responses[k], "shape": _complex(phi)}  # fmt: skip
