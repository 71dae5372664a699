"""Ring buffer, trigger and hit checks, fed arrays made by the simulated structure's physics."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest

from taprig.daemon.capture.acquire import Acquirer, RingBuffer, TriggerSettings
from taprig.daemon.capture.hits import (
    DOUBLE_HIT,
    GAP,
    OVERLOAD,
    TOO_SOFT,
    UNDECAYED,
    CheckSettings,
    check_hit,
    pulse_width_of_half_sine,
)
from taprig.daemon.records import ChannelSpec, Role
from taprig.firmware_protocol.simpiece import demo_panel
from taprig.firmware_protocol.simpiece.synth import Pulse, ResponseSynth

RATE = 51_200.0
HAMMER_V_PER_N = 2.25e-3
ACC_V_PER_MS2 = 1.02e-3
CHANNELS = (
    ChannelSpec(0, Role.FORCE, "hammer", 2.25, "mV/N", 1 / HAMMER_V_PER_N),
    ChannelSpec(1, Role.RESPONSE, "acc1", 1.02, "mV/(m/s^2)", 1 / ACC_V_PER_MS2),
    ChannelSpec(2, Role.RESPONSE, "acc2", 1.02, "mV/(m/s^2)", 1 / ACC_V_PER_MS2),
)
TRIGGER = TriggerSettings(level_n=2.0, hysteresis_n=0.5, pretrigger=256, block=8192)
CHECKS = CheckSettings(force_channel=0, response_channels=(1, 2), trigger_level_n=2.0,
                       force_floor_n=5.0)  # fmt: skip


def stream(
    pulses: list[Pulse], seconds: float, chunk: int = 512, seed: int = 0
) -> list[np.ndarray]:
    """Volts (3, chunk) chunks of the demo panel's hammer and two accelerometers."""
    synth = ResponseSynth(demo_panel(), RATE, chunk)
    for p in pulses:
        synth.add(p)
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(int(seconds * RATE / chunk)):
        force, accel = synth.next_chunk()
        volts = np.vstack([force[None] * HAMMER_V_PER_N, accel * ACC_V_PER_MS2])
        out.append(volts + rng.normal(0, 2e-5, volts.shape))
    return out


def acquirer() -> Acquirer:
    return Acquirer(CHANNELS, TRIGGER, RATE, [5.0, 5.0, 5.0])


def run(chunks: list[np.ndarray], acq: Acquirer | None = None, skip: set[int] | None = None):  # type: ignore[no-untyped-def]
    acq = acq or acquirer()
    records = []
    for k, c in enumerate(chunks):
        if skip and k in skip:
            continue
        records += acq.feed(k * c.shape[1], c)
    return records


def test_ring_buffer_wraps_and_refuses_what_it_lost() -> None:
    ring = RingBuffer(2, 1000)
    data = np.arange(2 * 2500, dtype=float).reshape(2, 2500)
    for i in range(0, 2500, 300):
        ring.write(i, data[:, i : i + 300])
    np.testing.assert_array_equal(ring.read(1600, 900), data[:, 1600:2500])  # type: ignore[arg-type]
    assert ring.read(1400, 10) is None  # overwritten
    assert ring.read(2400, 200) is None  # not yet arrived


def test_trigger_index_and_pretrigger_exact() -> None:
    """The record starts `pretrigger` samples before the first sample at or above the level."""
    t0 = 0.1 + 0.3 / RATE
    chunks = stream([Pulse("C4", t0, 0.001, 30.0)], 0.5)
    (rec,) = run(chunks)
    # half-sine 30 sin(pi (t - t0)/T) >= 2 N first at t - t0 = T asin(2/30)/pi
    t_cross = t0 + 0.001 * math.asin(2.0 / 30.0) / math.pi
    expected = math.ceil(t_cross * RATE)
    assert abs(rec.trigger_index - expected) <= 1  # noise can move the crossing by a sample
    assert rec.pretrigger == 256 and rec.block == 8192
    np.testing.assert_allclose(rec.data[0].max(), 30.0, rtol=0.01)  # SI: newtons
    assert not rec.gap and not any(rec.near_full_scale)


def test_clean_hits_accepted_with_width_and_peak() -> None:
    """Pulse width: a half-sine of base T spends T(1 − 2 asin(0.05)/π) above 5 % of its peak."""
    pulses = [Pulse("A1", 0.05 + k * 0.4, 0.0012, 25.0 + 5 * k) for k in range(4)]
    records = run(stream(pulses, 1.8))
    assert len(records) == 4
    for k, rec in enumerate(records):
        v = check_hit(rec, CHECKS)
        assert v.accepted, v.rejections
        assert v.peak_force_n == pytest.approx(25.0 + 5 * k, rel=0.01)
        assert pulse_width_of_half_sine(v.pulse_width_s) == pytest.approx(0.0012, abs=2 / RATE)


def test_double_hit_rejected() -> None:
    first = Pulse("B2", 0.05, 0.001, 30.0)
    second = Pulse("B2", 0.05 + 0.001 + 0.003, 0.001, 9.0)
    (rec,) = run(stream([first, second], 0.4))
    v = check_hit(rec, CHECKS)
    assert not v.accepted
    assert [f.code for f in v.rejections] == [DOUBLE_HIT]
    # From where the first pulse falls below 5 % of 30 N to where the second rises above
    # 10 % of 30 N (3 N of its 9 N peak), for half-sines of T = 1 ms 3 ms apart:
    gap_ms = 3.0 + 1.0 * math.asin(0.05) / math.pi + 1.0 * math.asin(3.0 / 9.0) / math.pi
    assert f"{gap_ms:.1f} ms" in v.rejections[0].message


def test_too_soft_rejected() -> None:
    (rec,) = run(stream([Pulse("B2", 0.05, 0.001, 3.5)], 0.4))
    v = check_hit(rec, CHECKS)
    assert [f.code for f in v.rejections] == [TOO_SOFT]


def test_overload_by_near_full_scale_and_by_device_flag() -> None:
    chunks = stream([Pulse("B3", 0.05, 0.001, 30.0)], 0.4)
    for c in chunks:
        np.clip(c, -0.3, 0.3, out=c)  # a ±0.3 V range: the driving point response clips
    acq = Acquirer(CHANNELS, TRIGGER, RATE, [0.3, 0.3, 0.3])
    (rec,) = run(chunks, acq)
    v = check_hit(rec, CHECKS)
    assert OVERLOAD in [f.code for f in v.rejections]
    acq = acquirer()
    acq.status(0, 0)
    records = []
    for k, c in enumerate(stream([Pulse("B3", 0.05, 0.001, 30.0)], 0.4)):
        records += acq.feed(k * 512, c)
        if k == 6:
            acq.status((k + 1) * 512, 0b010)
    (rec,) = records
    assert rec.device_overload == (False, True, False)
    assert OVERLOAD in [f.code for f in check_hit(rec, CHECKS).rejections]
    # the operator is told which channel by its label, as the configuration names it
    named = dataclasses.replace(CHECKS, labels=("hammer", "acc1", "acc2"))
    (finding,) = [f for f in check_hit(rec, named).rejections if f.code == OVERLOAD]
    assert finding.message.endswith("(acc1)"), finding.message


def test_gap_inside_record_rejected_and_outside_not() -> None:
    chunks = stream([Pulse("D5", 0.05, 0.001, 30.0), Pulse("D5", 0.6, 0.001, 30.0)], 1.0)
    lost = int(0.1 * RATE) // 512  # a chunk inside the first record
    records = run(chunks, skip={lost})
    assert len(records) == 2
    assert records[0].gap and not records[1].gap
    assert [f.code for f in check_hit(records[0], CHECKS).rejections] == [GAP]
    assert check_hit(records[1], CHECKS).accepted


def test_undecayed_response_warns() -> None:
    """A lightly damped panel still rings 0.16 s after a tap: warn (it is not a rejection)."""
    short = TriggerSettings(level_n=2.0, hysteresis_n=0.5, pretrigger=256, block=8192)
    (rec,) = run(
        stream([Pulse("C3", 0.05, 0.001, 30.0)], 0.4), Acquirer(CHANNELS, short, RATE, [5.0] * 3)
    )
    v = check_hit(rec, CHECKS)
    assert v.accepted
    assert [w.code for w in v.warnings] == [UNDECAYED]
    assert "exponential window" in v.warnings[0].message


def test_no_trigger_on_noise() -> None:
    assert run(stream([], 0.5)) == []
