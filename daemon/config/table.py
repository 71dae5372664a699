"""The settings table: every setting of the daemon declared once, as data.

`SETTINGS` holds the scalar settings (section, key, kind, default, unit, help, what is
allowed); `CHANNEL_SETTINGS` the keys of one ``[[channels]]`` table. Sensitivities are
converted here, once, into ChannelSpec.si_per_volt (N/V or (m/s²)/V).
"""

from __future__ import annotations

import ipaddress
from collections.abc import Callable
from pathlib import Path

from taprig.firmware_protocol.frames import MAX_CHANNELS

from .. import placement
from ..records import ChannelSpec, Role
from .setting import (
    _CHANNEL_LABEL,
    _RIG_NAME,
    DATA_DIR_ENV,
    STANDARD_GRAVITY,
    AcceptMode,
    Kind,
    LinkReader,
    Setting,
    StreamFormat,
    TriggerSlope,
    _is_power_of_two_block,
    _valid_url,
)


def _parses(parse: Callable[[str], object], text: str) -> bool:
    """Whether `parse` takes `text` without a ValueError."""
    try:
        parse(text)
    except ValueError:
        return False
    return True


def _is_direction(text: str) -> bool:
    return _parses(placement.direction_vector, text)


SETTINGS: tuple[Setting, ...] = (
    Setting(
        "rig", "name", Kind.STR, "taprig", "",
        "name of this rig, used to announce and find it on the local network",
        allowed="1 to 63 letters, digits or hyphens, not starting or ending with a hyphen "
        "(a DNS label, RFC 1123)",
        check=lambda s: _RIG_NAME.fullmatch(s) is not None,
    ),
    Setting(
        "device", "url", Kind.STR, "simulated", "",
        'where the device is: a pyserial port or URL, or "simulated" (a built-in simulated '
        'rig on a pseudo-terminal), "simulated:text" (the same, printing text), "simulated:tcp" '
        "(the same over a loopback TCP socket)",
        allowed='a serial port or pyserial URL (e.g. "/dev/ttyACM0", '
        '"socket://192.168.4.1:5000") or one of "simulated", "simulated:text", "simulated:tcp"',
        check=_valid_url,
    ),
    Setting(
        "device", "format", Kind.CHOICE, StreamFormat.BINARY, "",
        "how the device encodes its stream: framed binary or plain text lines",
        choices=StreamFormat,
    ),
    Setting(
        "device", "baudrate", Kind.INT, 921_600, "bit/s",
        "serial line speed; ignored by USB CDC devices and socket:// URLs",
        allowed="an integer > 0", check=lambda n: n > 0,
    ),
    Setting(
        "device", "text_rate_hz", Kind.FLOAT, 0.0, "Hz",
        'text format only: sample rate; 0 takes it from the stream\'s "# rate=" line',
        allowed='0 (take the rate from the "# rate=" line) or a number > 0',
        check=lambda x: x >= 0.0,
    ),
    Setting(
        "device", "text_full_scale_v", Kind.FLOAT, 10.0, "V",
        "text format only: input full scale of every channel, for overload detection",
        allowed="a number > 0", check=lambda x: x > 0.0,
    ),
    Setting(
        "device", "stall_s", Kind.FLOAT, 2.0, "s",
        "no bytes for this long means the link has stalled: close and reconnect",
        allowed="a number > 0", check=lambda x: x > 0.0,
    ),
    Setting(
        "device", "reader", Kind.CHOICE, LinkReader.PROCESS, "",
        "where the port is read: in a small process of its own, which the service's load "
        "cannot hold up (no sample lost while many clients pull), or in a daemon thread",
        choices=LinkReader,
    ),
    Setting(
        "capture", "block", Kind.INT, 16_384, "samples",
        "length of one hit record, pre-trigger included",
        allowed="a power of two from 256 to 65536", check=_is_power_of_two_block,
    ),
    Setting(
        "capture", "pretrigger", Kind.INT, 256, "samples",
        "samples kept before the trigger sample",
        allowed="an integer ≥ 0 and below half of capture.block", check=lambda n: n >= 0,
    ),
    Setting(
        "capture", "trigger_level_n", Kind.FLOAT, 2.0, "N",
        "force that starts a record when crossed in the direction of trigger_slope",
        allowed="a number > 0", check=lambda x: x > 0.0,
    ),
    Setting(
        "capture", "trigger_slope", Kind.CHOICE, TriggerSlope.RISING, "",
        "which crossing of the trigger level starts a record",
        choices=TriggerSlope,
    ),
    Setting(
        "capture", "hysteresis_n", Kind.FLOAT, 0.5, "N",
        "the force must fall back this far below the trigger level before the trigger re-arms",
        allowed="a number ≥ 0 and below capture.trigger_level_n", check=lambda x: x >= 0.0,
    ),
    Setting(
        "capture", "averages", Kind.INT, 5, "hits",
        "accepted hits averaged into the FRF of one point",
        allowed="an integer from 1 to 100", check=lambda n: 1 <= n <= 100,
    ),
    Setting(
        "capture", "accept", Kind.CHOICE, AcceptMode.AUTO, "",
        '"auto": a hit that passes the checks is averaged at once; "operator": every hit '
        "waits for the operator to accept or reject it",
        choices=AcceptMode,
    ),
    Setting(
        "capture", "force_floor_n", Kind.FLOAT, 5.0, "N",
        "reject a hit whose peak force is below this",
        allowed="a number ≥ 0", check=lambda x: x >= 0.0,
    ),
    Setting(
        "capture", "full_scale_margin", Kind.FLOAT, 0.01, "fraction of full scale",
        "a sample within this fraction of full scale counts as an overload",
        allowed="a number from 0 to 0.5", check=lambda x: 0.0 <= x <= 0.5,
    ),
    Setting(
        "capture", "double_hit_fraction", Kind.FLOAT, 0.1, "fraction of the first peak",
        "a second force pulse above this fraction of the first peak, after the first pulse "
        "has ended, is a double hit",
        allowed="a number between 0 and 1 (both excluded)", check=lambda x: 0.0 < x < 1.0,
    ),
    Setting(
        "capture", "decay_warning_fraction", Kind.FLOAT, 0.05, "fraction of the response peak",
        "a response still above this fraction of its peak at the end of the record gives a "
        "warning that suggests the exponential window",
        allowed="a number between 0 and 1 (both excluded)", check=lambda x: 0.0 < x < 1.0,
    ),
    Setting(
        "capture", "ring_seconds", Kind.FLOAT, 4.0, "s",
        "length of the sample ring buffer; at run time it must hold at least two records",
        allowed="a number > 0", check=lambda x: x > 0.0,
    ),
    Setting(
        "windows", "force_margin_s", Kind.FLOAT, 0.002, "s",
        "force window: time kept after the end of the force pulse before the taper begins",
        allowed="a number ≥ 0", check=lambda x: x >= 0.0,
    ),
    Setting(
        "windows", "force_taper_s", Kind.FLOAT, 0.001, "s",
        "force window: length of the taper from 1 down to 0 after the margin",
        allowed="a number ≥ 0", check=lambda x: x >= 0.0,
    ),
    Setting(
        "windows", "exponential_end", Kind.FLOAT_OR_NONE, 0.01, "fraction",
        "exponential window on the responses: its value at the last sample of the record "
        '(1 at its start); 0 or "none" switches it off',
        allowed='a number between 0 and 1 (both excluded), or 0 or "none" for no window',
        check=lambda x: 0.0 < x < 1.0,
    ),
    Setting(
        "store", "data_dir", Kind.PATH, Path("/var/lib/taprig"), "",
        "folder of the point-set store; a relative path is taken from the config file's "
        f"folder; the environment variable {DATA_DIR_ENV} replaces the file's value; unset, "
        "it is /var/lib/taprig for root and $XDG_STATE_HOME/taprig (~/.local/state/taprig) "
        "for anyone else",
        allowed="a non-empty path",
    ),
    Setting(
        "store", "min_free_mb", Kind.INT, 200, "MB",
        "refuse to arm while the data folder's disk has less free space than this",
        allowed="an integer ≥ 0", check=lambda n: n >= 0,
    ),
    Setting(
        "service", "bind", Kind.STR, "0.0.0.0", "",
        "address the HTTP service listens on (0.0.0.0: every interface; 127.0.0.1: this "
        "board only)",
        allowed="an IPv4 or IPv6 address", check=lambda s: _is_ip(s),
    ),
    Setting(
        "service", "port", Kind.INT, 8470, "",
        "TCP port of the HTTP service (0: any free port)",
        allowed="an integer from 0 to 65535", check=lambda n: 0 <= n <= 65535,
    ),
    Setting(
        "service", "max_request_kb", Kind.INT, 1024, "KiB",
        "largest request body the service accepts",
        allowed="an integer from 1 to 65536", check=lambda n: 1 <= n <= 65536,
    ),
    Setting(
        "service", "advertise", Kind.BOOL, True, "",
        "announce the rig on the local network with mDNS",
        allowed="true or false", check=lambda b: True,
    ),
    Setting(
        "service", "announce_on", Kind.STR, "", "",
        "IPv4 addresses of the interfaces to announce on, separated by commas (empty: all)",
        allowed="empty, or IPv4 addresses separated by commas",
        check=lambda s: all(_is_ip(a.strip()) for a in s.split(",")) if s.strip() else True,
    ),
    Setting(
        "service", "max_connections", Kind.INT, 512, "",
        "client connections served at once (each is an open file; the service unit's "
        "LimitNOFILE must leave room)",
        allowed="an integer from 1 to 65536", check=lambda n: 1 <= n <= 65536,
    ),
    Setting(
        "service", "connections_per_address", Kind.INT, 32, "",
        "connections one client address may hold at once, so that one neighbour cannot "
        "take them all",
        allowed="an integer from 1 to 65536", check=lambda n: 1 <= n <= 65536,
    ),
    Setting(
        "service", "header_timeout_s", Kind.FLOAT, 10.0, "s",
        "time a connection has to send a request's headers before it is closed",
        allowed="a number from 0.1 to 600", check=lambda x: 0.1 <= x <= 600,
    ),
    Setting(
        "service", "body_timeout_s", Kind.FLOAT, 30.0, "s",
        "time a request has to send its body before it is answered 408",
        allowed="a number from 0.1 to 600", check=lambda x: 0.1 <= x <= 600,
    ),
)  # fmt: skip


def _is_ip(text: str) -> bool:
    return _parses(ipaddress.ip_address, text)


_UNITS: dict[str, str] = {
    # as written -> the spelling kept in ChannelSpec.sensitivity_unit
    "mV/N": "mV/N",
    "mV/(m/s^2)": "mV/(m/s^2)",
    "mV/(m/s²)": "mV/(m/s^2)",
    "mV/ms2": "mV/(m/s^2)",
    "mV/g": "mV/g",
}
_UNITS_FOR_ROLE: dict[Role, tuple[str, ...]] = {
    Role.FORCE: ("mV/N",),
    Role.RESPONSE: ("mV/(m/s^2)", "mV/g"),
}

CHANNEL_SETTINGS: tuple[Setting, ...] = (
    Setting(
        "channels", "index", Kind.INT, None, "",
        "the device's channel number (0 is the first channel of the stream); unique",
        allowed=f"an integer from 0 to {MAX_CHANNELS - 1}",
        check=lambda n: 0 <= n < MAX_CHANNELS,
    ),
    Setting(
        "channels", "role", Kind.CHOICE, None, "",
        '"force" for the hammer (exactly one channel), "response" for an accelerometer',
        choices=Role,
    ),
    Setting(
        "channels", "label", Kind.STR, None, "",
        "the channel's name in results; unique",
        allowed="1 to 32 letters, digits, '_', '.' or '-'",
        check=lambda s: _CHANNEL_LABEL.fullmatch(s) is not None,
    ),
    Setting(
        "channels", "sensitivity", Kind.FLOAT, None, "unit",
        "sensitivity from the sensor's calibration sheet, in the unit given by unit",
        allowed="a number > 0", check=lambda x: x > 0.0,
    ),
    Setting(
        "channels", "unit", Kind.STR, None, "",
        'unit of sensitivity: "mV/N" for the force channel; "mV/(m/s^2)" (also written '
        '"mV/(m/s²)" or "mV/ms2") or "mV/g" for a response channel',
        allowed="one of " + ", ".join(f'"{u}"' for u in _UNITS),
        check=lambda s: s in _UNITS,
    ),
    Setting(
        "channels", "location", Kind.STR, "", "m",
        "response channels: where the sensor sits, for a roving-hammer test; optional here "
        "(else given when the test is made), never guessed",
        allowed=f"\"\" (not given here) or {placement.WHERE_HELP}",
        check=lambda s: not s.strip() or placement.check_where(s) is None,
    ),
    Setting(
        "channels", "direction", Kind.STR, "+z", "",
        "response channels: the direction the sensor measures in",
        allowed=placement.DIRECTION_HELP, check=_is_direction,
    ),
)  # fmt: skip

_BY_NAME: dict[str, Setting] = {s.name: s for s in SETTINGS}
_SECTION_KEYS: dict[str, tuple[str, ...]] = {}
for _s in SETTINGS:
    _SECTION_KEYS.setdefault(_s.section, ())
    _SECTION_KEYS[_s.section] += (_s.key,)
_CHANNEL_KEYS = tuple(s.key for s in CHANNEL_SETTINGS)


def si_per_volt(sensitivity: float, unit: str) -> float:
    """Engineering units per volt from a sensitivity in `unit` (any spelling in _UNITS).

    mV/N → N/V; mV/(m/s²) → (m/s²)/V; mV/g → (m/s²)/V through g_n = STANDARD_GRAVITY.
    """
    canonical = _UNITS[unit]
    per_unit_mv = sensitivity / STANDARD_GRAVITY if canonical == "mV/g" else sensitivity
    return 1000.0 / per_unit_mv


def _channel(
    index: int, role: Role, label: str, sensitivity: float, unit: str, location: str = "",
    direction: str = "+z",
) -> ChannelSpec:  # fmt: skip
    return ChannelSpec(
        index=index,
        role=role,
        label=label,
        sensitivity=sensitivity,
        sensitivity_unit=_UNITS[unit],
        si_per_volt=si_per_volt(sensitivity, unit),
        location=location.strip(),
        direction=direction.strip(),
    )


SIMULATED_CHANNELS: tuple[ChannelSpec, ...] = (
    # the built-in simulated test piece's channels (firmware_protocol/simpiece/instrument.py)
    _channel(0, Role.FORCE, "hammer", 2.25, "mV/N"),
    _channel(1, Role.RESPONSE, "acc1", 1.02, "mV/(m/s^2)"),
    _channel(2, Role.RESPONSE, "acc2", 1.02, "mV/(m/s^2)"),
)
"""Channels used when device.url is a simulated one and the file configures none."""
