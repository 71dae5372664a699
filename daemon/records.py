"""Plain data passed between the daemon's stages (acquire → hits → spectra → session → store).

Frozen dataclasses and numpy arrays with their units and shapes written once here.
"""

from __future__ import annotations

import enum
from dataclasses import dataclass, field
from typing import Any

import numpy as np


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
    """

    first_index: int
    trigger_index: int
    rate_hz: float
    data: np.ndarray
    near_full_scale: tuple[bool, ...]
    device_overload: tuple[bool, ...]
    gap: bool

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


@dataclass(frozen=True, slots=True)
class StoredHit:
    """A hit kept with its point set: its record (float32 SI) and what the checks said."""

    trigger_index: int
    utc: str
    accepted: bool
    peak_force_n: float
    pulse_width_s: float
    findings: tuple[Finding, ...]
    data: np.ndarray | None  # (channels, block) float32, None when fetched without raw hits


@dataclass(frozen=True)
class PointSet:
    """Everything measured at one grid point of one test, once completed.

    freq_hz: (n_freq,). h1, h2, gfx: complex (n_resp, n_freq), (m/s²)/N and (m/s²)·N/Hz;
    coherence, gxx: real (n_resp, n_freq); gff: real (n_freq,) N²/Hz. Response order is
    `response_labels`. In roving-hammer mode drive_point is the point and response_points
    are the fixed sensors; in roving-sensor mode drive_point is the reference.
    """

    test: str
    point: str
    version: int
    roving_mode: RovingMode
    drive_point: str
    response_labels: tuple[str, ...]
    response_points: tuple[str, ...]
    n_averages: int
    freq_hz: np.ndarray
    h1: np.ndarray
    h2: np.ndarray
    coherence: np.ndarray
    gff: np.ndarray
    gxx: np.ndarray
    gfx: np.ndarray
    hits: tuple[StoredHit, ...]
    meta: dict[str, Any] = field(default_factory=dict)
    completed_utc: str = ""
    seq: int = 0  # change sequence number given by the store on commit
