"""Plain data passed between the daemon's stages (acquire → hits → spectra → session → store).

Frozen dataclasses and numpy arrays with their units and shapes written once here; the point
set and its hits are declared in `schema.pointset`, which the wire's records extend as well.
"""

from __future__ import annotations

import enum
from dataclasses import dataclass

import numpy as np

from taprig.schema.pointset import HitFields, PointSetFields


class Role(enum.StrEnum):
    FORCE = "force"
    RESPONSE = "response"


class RovingMode(enum.StrEnum):
    HAMMER = "hammer"  # roving hammer: the sensors stay, the hammer visits every grid point
    SENSOR = "sensor"  # roving sensor: the hammer stays at the reference, the sensor moves


@dataclass(frozen=True, slots=True)
class ChannelSpec:
    """One device channel as configured.

    si_per_volt: engineering units per volt at the device input (N/V for the hammer,
    (m/s²)/V for accelerometers), from the user's sensitivity, converted once.
    """

    index: int
    role: Role
    label: str
    sensitivity: float
    sensitivity_unit: str  # as entered: "mV/N", "mV/(m/s^2)" or "mV/g"
    si_per_volt: float
    location: str = ""  # a response sensor's place as written (daemon/placement.py); "": unset
    direction: str = "+z"  # the direction it measures in, as written


@dataclass(frozen=True, slots=True)
class HitRecord:
    """One triggered record of all channels.

    data: (channels, block) float64 in SI units (N, m/s²), channel order of the config.
    first_index: device sample index of data[:, 0]; trigger_index: the sample that crossed
    the trigger level, so the pre-trigger is trigger_index - first_index samples.
    near_full_scale: per channel, True if any sample is within 1 % of full scale.
    device_overload: per channel, True if a STATUS frame flagged an overload in the record.
    gap: the record straddles samples the link lost.
    per_count: (channels,) float64 SI units per device code (volts per code × si_per_volt),
    so data / per_count[:, None] rounds to the codes the device sent; None when the device
    sends no codes (float32 samples, a text board). code_bits: the widest converter among
    the record's channels.
    """

    first_index: int
    trigger_index: int
    rate_hz: float
    data: np.ndarray
    near_full_scale: tuple[bool, ...]
    device_overload: tuple[bool, ...]
    gap: bool
    per_count: np.ndarray | None = None
    code_bits: int = 32

    @property
    def pretrigger(self) -> int:
        return self.trigger_index - self.first_index

    @property
    def block(self) -> int:
        return int(self.data.shape[1])


@dataclass(frozen=True, slots=True)
class Finding:
    """A check's outcome with a reason code and a sentence for the operator."""

    code: str
    message: str


@dataclass(frozen=True, slots=True)
class HitVerdict:
    """What the checks made of one hit. Rejections are reasons, not exceptions."""

    accepted: bool
    rejections: tuple[Finding, ...]
    warnings: tuple[Finding, ...]
    peak_force_n: float
    pulse_width_s: float
    pulse_end: int
    """Index into the record one past the end of the (first) force pulse."""


@dataclass(frozen=True, slots=True)
class GridPoint:
    """A point of a test grid: coordinates in metres, direction a label such as "+z"."""

    label: str
    x: float
    y: float
    z: float
    direction: str = "+z"


@dataclass(frozen=True, slots=True, eq=False)
class StoredHit(HitFields[Finding]):
    """A hit kept with its point set (fields, units and shapes: `schema.pointset.HitFields`);
    its findings as the checks gave them."""


@dataclass(frozen=True, slots=True, eq=False, kw_only=True)
class PointSet(PointSetFields[StoredHit]):
    """Everything measured at one grid point of one test, once completed (fields, units and
    shapes: `schema.pointset.PointSetFields`). roving_mode is a `RovingMode`; version, seq and
    completed_utc are given by the store on commit."""
