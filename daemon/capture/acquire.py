"""Acquisition: a ring buffer of all channels and a trigger on the force channel.

Fed decoded sample blocks (volts) in stream order, it converts them once to SI
units, keeps the last few seconds, and cuts one record of `block` samples per
tap, starting `pretrigger` samples before the force first crosses the trigger
level. Lost samples (link gaps) and device overload flags are remembered by
sample index so the checks can reject a record that touches them.

The trigger search is vectorised over each incoming block; Python work is per
block and per trigger, never per sample.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ..records import ChannelSpec, HitRecord, Role


@dataclass(frozen=True, slots=True)
class TriggerSettings:
    """Level and hysteresis in N on the force channel; slope "rising" or "falling"."""

    level_n: float
    hysteresis_n: float
    slope: str = "rising"
    pretrigger: int = 256
    block: int = 16384


class RingBuffer:
    """The last `capacity` sample frames of every channel, addressed by device sample index."""

    def __init__(self, channels: int, capacity: int, dtype: type[np.generic] = np.float64) -> None:
        self.capacity = capacity
        self._data = np.zeros((channels, capacity), dtype=dtype)
        self.end = 0  # device index one past the newest sample held
        self.start = 0  # oldest index held

    def reset(self, index: int) -> None:
        self.start = self.end = index

    def write(self, first: int, data: np.ndarray) -> None:
        """Store (channels, n) samples starting at device index `first` (>= end)."""
        n = data.shape[1]
        if first > self.end:  # a gap: zeros stand in, the gap list says they are not real
            self._fill(self.end, np.zeros((data.shape[0], min(first - self.end, self.capacity))))
            self.end = first
        if n >= self.capacity:
            data = data[:, n - self.capacity :]
            first += n - self.capacity
            n = self.capacity
        self._fill(first, data)
        self.end = first + n
        self.start = max(self.start, self.end - self.capacity)

    def _fill(self, first: int, data: np.ndarray) -> None:
        n = data.shape[1]
        pos = first % self.capacity
        head = min(n, self.capacity - pos)
        self._data[:, pos : pos + head] = data[:, :head]
        if head < n:
            self._data[:, : n - head] = data[:, head:]

    def read(self, first: int, n: int) -> np.ndarray | None:
        """A copy of (channels, n) samples from device index `first`, or None if not held."""
        if first < self.start or first + n > self.end or n > self.capacity:
            return None
        idx = (first + np.arange(n)) % self.capacity
        out: np.ndarray = self._data[:, idx]
        return out


class Acquirer:
    """Ring buffer + trigger. `feed` returns the records completed by each new block."""

    def __init__(
        self,
        channels: Sequence[ChannelSpec],
        trigger: TriggerSettings,
        rate_hz: float,
        full_scale_v: Sequence[float],
        *,
        ring_seconds: float = 4.0,
        full_scale_margin: float = 0.01,
        volts_per_code: Sequence[float] | None = None,
        adc_bits: Sequence[int] | None = None,
    ) -> None:
        """volts_per_code, adc_bits: per device channel, as the device describes them; None
        for a device that sends no integer codes (its records are kept as SI values)."""
        self.channels = tuple(sorted(channels, key=lambda c: c.index))
        forces = [i for i, c in enumerate(self.channels) if c.role is Role.FORCE]
        if len(forces) != 1:
            raise ValueError("exactly one force channel is needed")
        self.force = forces[0]
        self.trigger = trigger
        self.rate_hz = rate_hz
        self._device_rows = np.array([c.index for c in self.channels])
        self._si = np.array([c.si_per_volt for c in self.channels])[:, None]
        self._per_count: np.ndarray | None = None  # SI units per code, each channel
        if volts_per_code is not None:
            vpc = np.asarray(volts_per_code, dtype=np.float64)[self._device_rows]
            self._per_count = vpc * self._si[:, 0]
            self._per_count.flags.writeable = False
        rows = self._device_rows.tolist()
        self._code_bits = 32 if adc_bits is None else max(int(adc_bits[i]) for i in rows)
        fs = np.asarray(full_scale_v, dtype=np.float64)[self._device_rows]
        self._clip_v = (1.0 - full_scale_margin) * fs
        capacity = max(int(ring_seconds * rate_hz), 2 * trigger.block)
        self.ring = RingBuffer(len(self.channels), capacity)
        self._near_fs = RingBuffer(len(self.channels), capacity, np.bool_)
        self._sign = 1.0 if trigger.slope == "rising" else -1.0
        self._armed = False
        self._pending: list[int] = []  # trigger indexes whose records are not complete yet
        self._hold_until = 0  # no new trigger before this index (the current record's end)
        self._gaps: list[tuple[int, int]] = []
        self._overloads: list[tuple[int, int, int]] = []  # (first, end, channel mask)
        self._status_index: int | None = None
        self._started = False

    # --- inputs ---------------------------------------------------------------

    def feed(self, first: int, volts: np.ndarray) -> list[HitRecord]:
        """A decoded block: volts (device channels, n) starting at device index `first`."""
        if not self._started or first < self.ring.end:
            self.restart(first)  # first block, or the device started its count again
            self._started = True
        elif first > self.ring.end:
            self.gap(self.ring.end, first - self.ring.end)
        data = volts[self._device_rows] * self._si
        near = np.abs(volts[self._device_rows]) >= self._clip_v[:, None]
        self.ring.write(first, data)
        self._near_fs.write(first, near)
        self._find_triggers(first, data[self.force] * self._sign)
        self._prune()
        return self._complete()

    def gap(self, first: int, count: int) -> None:
        """Samples first..first+count-1 never arrived."""
        self._gaps.append((first, first + count))
        self._armed = False  # a crossing cannot be trusted across missing samples
        self._prune()

    def status(self, sample_index: int, overload_mask: int) -> None:
        """A device STATUS: overloads since the previous STATUS, up to `sample_index`."""
        if overload_mask:
            start = self._status_index if self._status_index is not None else 0
            self._overloads.append((start, sample_index, overload_mask))
        self._status_index = sample_index

    def restart(self, first: int) -> None:
        """The device restarted its sample index: forget everything held."""
        self.ring.reset(first)
        self._near_fs.reset(first)
        self._pending.clear()
        self._gaps.clear()
        self._overloads.clear()
        self._status_index = None
        self._hold_until = first
        self._armed = False

    # --- trigger --------------------------------------------------------------

    def _find_triggers(self, first: int, force: np.ndarray) -> None:
        t = self.trigger
        pos = max(0, self._hold_until - first)
        while pos < force.size:
            if not self._armed:
                below = np.flatnonzero(force[pos:] < t.level_n - t.hysteresis_n)
                if below.size == 0:
                    return
                pos += int(below[0])
                self._armed = True
            above = np.flatnonzero(force[pos:] >= t.level_n)
            if above.size == 0:
                return
            trig = first + pos + int(above[0])
            self._pending.append(trig)
            self._armed = False
            self._hold_until = trig - t.pretrigger + t.block
            pos = self._hold_until - first

    def _complete(self) -> list[HitRecord]:
        t = self.trigger
        done: list[HitRecord] = []
        while self._pending and self._pending[0] - t.pretrigger + t.block <= self.ring.end:
            trig = self._pending.pop(0)
            rec = self._record(trig)
            if rec is not None:
                done.append(rec)
        return done

    def _record(self, trig: int) -> HitRecord | None:
        t = self.trigger
        first = trig - t.pretrigger
        data = self.ring.read(first, t.block)
        near = self._near_fs.read(first, t.block)
        if data is None or near is None:
            return None
        end = first + t.block
        gap = any(a < end and b > first for a, b in self._gaps)
        mask = 0
        for a, b, m in self._overloads:
            if a < end and b > first:
                mask |= m
        overload = tuple(bool(mask >> int(c.index) & 1) for c in self.channels)
        return HitRecord(
            first_index=first,
            trigger_index=trig,
            rate_hz=self.rate_hz,
            data=data,
            near_full_scale=tuple(bool(x) for x in np.asarray(near.any(axis=1)).tolist()),
            device_overload=overload,
            gap=gap,
            per_count=self._per_count,
            code_bits=self._code_bits,
        )

    def _prune(self) -> None:
        oldest = self.ring.start
        self._gaps = [g for g in self._gaps if g[1] > oldest]
        self._overloads = [o for o in self._overloads if o[1] > oldest]
