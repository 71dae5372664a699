"""The simulated test piece's settings, switchable faults and record of what it did.

How the device is built (`InstrumentSettings`), which faults are on (`Faults`),
the ground truth of each tap (`TapRecord`) and the running counts
(`InstrumentCounters`), with the limits the piece enforces.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from .. import frames as fr

MAX_LAG_S = 5.0  # s of samples the simulated converter's FIFO holds while the host is starved

MAX_SPEED = 16.0  # simulated seconds per wall second at most; beyond it a host cannot keep up
MIN_RATE_HZ = 1000.0
MAX_RATE_HZ = 204_800.0


@dataclass(frozen=True)
class InstrumentSettings:
    """How the simulated device is built. Sensitivities as on a calibration sheet."""

    rate_hz: float = 51_200.0
    sample_format: fr.SampleFormat = fr.SampleFormat.INT24
    adc_bits: int = 24
    full_scale_v: float = 5.0  # ±5 V input range, common for IEPE DAQ front ends
    hammer_mv_per_n: float = 2.25  # a general-purpose impact hammer (common practice)
    accel_mv_per_ms2: float = 1.02  # 10 mV/g, a light accelerometer for thin panels
    noise_v_rms: float = 20e-6  # per channel, at the ADC input
    frame_samples: int = 256  # 5 ms per DATA frame at 51.2 kHz
    output: str = "binary"  # or "text"
    device_id: str = "SIMULATED-PANEL"
    firmware: str = "sim-1"
    default_force_n: float = 30.0
    default_width_s: float = 0.0008  # a medium (plastic) tip
    info_interval_s: float = 1.0  # s between INFO (binary) or rate lines (text); inf: once
    answers_rate_query: bool = True  # text: a "?rate" line from the host repeats the rate line
    status_interval_s: float = 0.25
    device_buffer_bytes: int = 262_144  # its link buffer; beyond it samples wait in the FIFO
    seed: int = 0
    # The converter's linear-phase anti-alias filter on every channel (synth.converter_filter);
    # False point-samples the continuous signals, so content above Nyquist folds back.
    anti_alias: bool = True
    # Simulated seconds per wall-clock second: above 1 the piece runs faster than real time
    # (the demo), so a tap's record arrives in a fraction of its length. 1 is a real device.
    speed: float = 1.0


@dataclass
class Faults:
    """Switchable faults; change any field at any time from any thread."""

    double_hit_probability: float = 0.0
    overload_probability: float = 0.0
    drop_frame_probability: float = 0.0
    corrupt_probability: float = 0.0  # per frame: one byte flipped
    garbage_probability: float = 0.0  # per frame: sent as random bytes of the same length
    stalled: bool = False  # the device sends nothing at all; its sample clock runs on


@dataclass(frozen=True, slots=True)
class TapRecord:
    """What the instrument did for one tap request (the ground truth of a hit)."""

    point: str
    t0_s: float
    first_index: int
    peak_n: float
    width_s: float
    double_hit: bool
    overload: bool


@dataclass
class InstrumentCounters:
    frames_sent: int = 0
    frames_dropped: int = 0
    frames_corrupted: int = 0
    overruns: int = 0
    taps_lost: int = 0  # taps whose samples an overrun skipped: the host never saw them
    bytes_sent: int = 0
    commands: int = 0
    taps: list[TapRecord] = field(default_factory=list)
