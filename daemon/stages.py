"""The capture stages built from the configuration and the device's own description.

Pure construction, no state: the rig (daemon/rig.py) calls these when the device identifies
itself (decoder, acquirer), at start (checks), when the link opens (what to ask the
device) and when a test is selected (session).
"""

from __future__ import annotations

import logging
from collections.abc import Mapping, Sequence
from typing import Any

from taprig.firmware_protocol import (
    Command,
    Decoder,
    DeviceInfo,
    FrameEncoder,
    Opcode,
    SampleFormat,
    make_decoder,
)
from taprig.firmware_protocol.text import RATE_QUERY

from . import __version__, placement
from .capture.acquire import Acquirer, TriggerSettings
from .capture.hits import CheckSettings
from .capture.link import SerialLink
from .capture.linkproc import ProcessLink
from .capture.session import Plan, Session
from .capture.spectra import WindowSettings
from .config import Config, LinkReader
from .errors import SessionError, TaprigError
from .grid import test_meta
from .records import GridPoint, Role, RovingMode
from .store import Store, TestPlan

log = logging.getLogger(__name__)
Places = Mapping[str, str | tuple[str, str]]  # label -> where, or (where, direction)

def link(config: Config, url: str) -> SerialLink | ProcessLink:
    """The link device.reader asks for (not started): a process of its own, or a thread."""
    device = config.device
    kind = ProcessLink if device.reader is LinkReader.PROCESS else SerialLink
    return kind(url, baudrate=device.baudrate, stall_after_s=device.stall_s)


def decoder(config: Config) -> Decoder:
    """The input format's decoder, as device.format names it."""
    d = config.device
    if d.format == "text":
        return make_decoder("text", rate_hz=d.text_rate_hz or None,
                            full_scale_v=d.text_full_scale_v,
                            rate_key="device.text_rate_hz = <Hz> in the configuration")  # fmt: skip
    return make_decoder("binary")


def opening_bytes(decoder: Decoder, enc: FrameEncoder) -> list[bytes]:
    """What the host writes to a device it has just opened: a binary device is asked to
    identify itself and start; a text device whose rate is unknown is asked to repeat it
    (a board that printed it once, before the port was opened, lost that line on opening)."""
    if decoder.name == "binary":
        return [enc.command(Command(Opcode.IDENTIFY, 1)), enc.command(Command(Opcode.START, 2))]
    return [RATE_QUERY] if decoder.info is None else []


def check_settings(config: Config) -> CheckSettings:
    """The hit checks' settings (the configuration never changes while the rig runs)."""
    cap = config.capture
    chans = sorted(config.channels, key=lambda c: c.index)
    force = next(i for i, c in enumerate(chans) if c.role is Role.FORCE)
    return CheckSettings(
        force_channel=force,
        response_channels=tuple(i for i, c in enumerate(chans) if c.role is Role.RESPONSE),
        trigger_level_n=cap.trigger_level_n,
        force_floor_n=cap.force_floor_n,
        double_hit_fraction=cap.double_hit_fraction,
        decay_warning_fraction=cap.decay_warning_fraction,
        exponential_window=config.windows.exponential_end is not None,
        sign=1.0 if cap.trigger_slope == "rising" else -1.0,
        labels=tuple(c.label for c in chans),
    )


def acquirer(config: Config, info: DeviceInfo) -> Acquirer:
    """An acquirer for the device as it described itself; TaprigError (a sentence for the
    operator) when its rate or its channels do not fit the configuration."""
    config.check_rate(info.rate_hz)
    needed = max(c.index for c in config.channels) + 1
    if info.channel_count < needed:
        raise TaprigError(f"the device has {info.channel_count} channels; "
                          f"the configuration uses {needed}")  # fmt: skip
    cap = config.capture
    trig = TriggerSettings(cap.trigger_level_n, cap.hysteresis_n, cap.trigger_slope,
                           cap.pretrigger, cap.block)  # fmt: skip
    codes = info.sample_format is not SampleFormat.FLOAT32  # float32 and text: no codes
    return Acquirer(
        config.channels, trig, info.rate_hz, [c.full_scale_v for c in info.channels],
        ring_seconds=cap.ring_seconds, full_scale_margin=cap.full_scale_margin,
        volts_per_code=info.volts_per_code() if codes else None,
        adc_bits=[c.adc_bits for c in info.channels],
    )  # fmt: skip


def session(config: Config, plan: TestPlan, info: DeviceInfo, done: Sequence[str]) -> Session:
    """A session on the stored test `plan` for the identified device; `done`: points measured."""
    w = config.windows
    return Session(
        Plan(plan.name, tuple(plan.grid), RovingMode(plan.roving_mode), plan.reference,
             plan.averages, dict(plan.meta.get("sensor_points", {}))),
        config.channels, info.rate_hz, config.capture.block,
        WindowSettings(w.force_margin_s, w.force_taper_s, w.exponential_end),
        auto_accept=config.capture.accept == "auto", meta=meta(config, info), done=done,
    )  # fmt: skip


def save_test(
    config: Config,
    store: Store,
    name: str,
    grid: list[GridPoint],
    roving_mode: RovingMode,
    reference: str | None,
    averages: int | None,
    sensor_points: Places | None,
    outline: str | None = None,
) -> list[str]:
    """Store a new test; returns the response channels whose place is still unknown.

    Sensor places come from daemon/placement.py's `test_meta`, never guessed; the grid's
    warnings are logged; the outline's text is kept when one came with the grid. Averages
    default to the configuration's."""
    try:
        ref, meta = placement.test_meta(roving_mode is RovingMode.HAMMER, grid, reference,
                                        config.response_channels, sensor_points or {})  # fmt: skip
    except ValueError as exc:
        raise SessionError(f"test {name!r}: {exc}") from None
    meta = {**test_meta(None, outline), **meta}
    for text in meta["grid_warnings"]:
        log.warning("test %s: %s", name, text)
    avg = averages if averages is not None else config.capture.averages
    store.save_test(name, grid, roving_mode, ref, avg, meta)
    return list(meta.get("sensors_missing", []))


def meta(config: Config, info: DeviceInfo) -> dict[str, Any]:
    """What every point set records of the rig and the device it was measured with."""
    cap = config.capture
    return {
        "rig": config.rig.name,
        "daemon_version": __version__,
        "pretrigger": cap.pretrigger,
        "trigger_level_n": cap.trigger_level_n,
        "device": {
            "id": info.device_id, "firmware": info.firmware,
            "protocol_version": info.protocol_version,
            "sample_format": info.sample_format.name.lower(), "rate_hz": info.rate_hz,
            "full_scale_v": [c.full_scale_v for c in info.channels],
            "adc_bits": [c.adc_bits for c in info.channels],
        },
    }  # fmt: skip
