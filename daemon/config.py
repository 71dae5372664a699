"""The daemon's configuration: every setting declared once, as data, and loaded in one place.

`SETTINGS` is the table (section, key, kind, default, allowed values, unit, help) of the
scalar settings; `CHANNEL_SETTINGS` the keys of one `[[channels]]` table. `load_config` reads
a TOML file (stdlib tomllib), the environment and command-line overrides `section.key=value`,
checks every value against the table and returns a frozen `Config` tree.

Precedence, lowest first: the table's defaults, the TOML file, the environment (only
TAPRIG_DATA_DIR, for store.data_dir), the command-line overrides. Every mistake is a
ConfigError whose message names the key, the value seen and what is allowed.

Sensitivities are converted once here into ChannelSpec.si_per_volt (N/V or (m/s²)/V).
"""

from __future__ import annotations

import difflib
import enum
import ipaddress
import math
import os
import re
import tomllib
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from taprig.firmware_protocol.frames import MAX_CHANNELS

from .errors import ConfigError
from .records import ChannelSpec, Role

STANDARD_GRAVITY = 9.80665
"""Standard acceleration of free fall g_n in m/s², exact by definition (3rd CGPM, 1901;
restated in ISO 80000-3). Used to turn mV/g sensitivities into mV/(m/s²)."""

DATA_DIR_ENV = "TAPRIG_DATA_DIR"
"""Environment variable that, when set and non-empty, replaces store.data_dir of the file."""


class StreamFormat(enum.StrEnum):
    """How the device encodes its stream (firmware_protocol/PROTOCOL.md)."""

    BINARY = "binary"  # framed, CRC-checked (sections 1-3)
    TEXT = "text"  # one line of volts per sample frame (section 4)


class TriggerSlope(enum.StrEnum):
    """Which crossing of the trigger level on the force channel starts a record."""

    RISING = "rising"
    FALLING = "falling"


class AcceptMode(enum.StrEnum):
    """Who decides whether a hit that passed the checks joins the average."""

    AUTO = "auto"  # every hit that passes the checks is averaged at once
    OPERATOR = "operator"  # every hit waits for the operator to accept or reject it


class Kind(enum.Enum):
    """The type of a setting: how a TOML value or an override's text becomes a Python value."""

    INT = "int"
    FLOAT = "float"
    STR = "str"
    BOOL = "bool"
    CHOICE = "choice"  # one of the values of Setting.choices (a StrEnum)
    PATH = "path"  # a string naming a file or folder; relative ones are resolved
    FLOAT_OR_NONE = "float or none"  # a number; 0 or "none" mean "off" and give None


class _WrongType(Exception):
    """Internal: a value of the wrong type; args[0] is a note such as " (a string)"."""


_TRUE_WORDS = frozenset({"true", "yes", "on", "1"})
_FALSE_WORDS = frozenset({"false", "no", "off", "0"})


@dataclass(frozen=True, slots=True)
class Setting:
    """One declared setting.

    allowed: what is allowed, as the phrase that follows "must be" in an error (for CHOICE
    it is built from `choices`). check: a test of the typed value (None: any value of the
    right type); it is not called on the None of FLOAT_OR_NONE. unit: the unit of the value,
    "" for plain numbers and words.
    """

    section: str
    key: str
    kind: Kind
    default: Any
    unit: str
    help: str
    allowed: str = ""
    check: Callable[[Any], bool] | None = None
    choices: type[enum.StrEnum] | None = None

    @property
    def name(self) -> str:
        """The dotted name used in messages and overrides, e.g. "capture.block"."""
        return f"{self.section}.{self.key}"

    @property
    def allowed_text(self) -> str:
        if self.kind is Kind.CHOICE and self.choices is not None:
            return "one of " + ", ".join(f'"{c.value}"' for c in self.choices)
        return self.allowed

    def parse(
        self,
        value: object,
        *,
        from_text: bool = False,
        label: str | None = None,
        where: str = "",
        base_dir: Path | None = None,
    ) -> Any:
        """The typed, checked value of a TOML value, or of override text when `from_text`.

        label: the name to put in messages (default `name`); where: appended to messages to
        say where the value came from; base_dir: folder relative paths are resolved against
        (default the current folder). Raises ConfigError naming label, value and what is
        allowed.
        """
        label = label or self.name
        shown = str(value) if from_text else _show(value)
        try:
            typed = self._from_text(str(value)) if from_text else self._from_toml(value)
        except _WrongType as exc:
            raise ConfigError(
                f"{label} = {shown}{exc.args[0]}: must be {self.allowed_text}{where}"
            ) from None
        if self.check is not None and typed is not None and not self.check(typed):
            raise ConfigError(f"{label} = {shown}: must be {self.allowed_text}{where}")
        if isinstance(typed, Path) and not typed.is_absolute():
            typed = (base_dir if base_dir is not None else Path.cwd()) / typed
        return typed

    def _from_toml(self, value: object) -> Any:
        note = f" ({_toml_type_word(value)})"
        number = (
            float(value) if isinstance(value, int | float) and not isinstance(value, bool) else None
        )
        if self.kind is Kind.INT:
            if isinstance(value, int) and not isinstance(value, bool):
                return value
            raise _WrongType(note)
        if self.kind is Kind.FLOAT:
            if number is not None:
                return _finite(number)
            raise _WrongType(note)
        if self.kind is Kind.FLOAT_OR_NONE:
            if isinstance(value, str) and value.strip().lower() == "none":
                return None
            if number is not None:
                return None if _finite(number) == 0.0 else number
            raise _WrongType(note)
        if self.kind is Kind.BOOL:
            if isinstance(value, bool):
                return value
            raise _WrongType(note)
        if not isinstance(value, str):
            raise _WrongType(note)
        return self._from_str(value)

    def _from_text(self, text: str) -> Any:
        text = text.strip()
        if self.kind is Kind.INT:
            try:
                return int(text)
            except ValueError:
                raise _WrongType("") from None
        if self.kind in (Kind.FLOAT, Kind.FLOAT_OR_NONE):
            if self.kind is Kind.FLOAT_OR_NONE and text.lower() == "none":
                return None
            try:
                number = _finite(float(text))
            except ValueError:
                raise _WrongType("") from None
            return None if self.kind is Kind.FLOAT_OR_NONE and number == 0.0 else number
        if self.kind is Kind.BOOL:
            if text.lower() in _TRUE_WORDS:
                return True
            if text.lower() in _FALSE_WORDS:
                return False
            raise _WrongType("")
        return self._from_str(text)

    def _from_str(self, text: str) -> Any:
        """STR, CHOICE and PATH, which read the same from TOML strings and from overrides."""
        if self.kind is Kind.CHOICE:
            assert self.choices is not None, f"{self.name}: a CHOICE setting needs choices"
            try:
                return self.choices(text)
            except ValueError:
                raise _WrongType("") from None
        if self.kind is Kind.PATH:
            if not text:
                raise _WrongType("")
            return Path(text).expanduser()
        return text


def _finite(number: float) -> float:
    if not math.isfinite(number):
        raise _WrongType("")
    return number


def _toml_type_word(value: object) -> str:
    if isinstance(value, bool):
        return "a boolean"
    if isinstance(value, int):
        return "an integer"
    if isinstance(value, float):
        return "a number"
    if isinstance(value, str):
        return "a string"
    if isinstance(value, dict):
        return "a table"
    if isinstance(value, list):
        return "an array"
    return "a date/time"


def _show(value: object) -> str:
    """A value as it would be written in TOML, for messages."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        escaped = value.replace("\\", "\\\\").replace('"', '\\"')
        return f'"{escaped}"'
    if isinstance(value, list):
        return "[" + ", ".join(_show(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{k} = {_show(v)}" for k, v in value.items()) + " }"
    return str(value)


def _is_power_of_two_block(n: int) -> bool:
    return 256 <= n <= 65536 and n & (n - 1) == 0


_RIG_NAME = re.compile(r"[A-Za-z0-9](?:[A-Za-z0-9-]{0,61}[A-Za-z0-9])?")
_CHANNEL_LABEL = re.compile(r"[A-Za-z0-9_.-]{1,32}")
VIRTUAL_URLS = ("virtual", "virtual:text", "virtual:tcp")
"""device.url values that make the daemon start its own virtual instrument."""


def _valid_url(url: str) -> bool:
    if url.startswith("virtual"):
        return url in VIRTUAL_URLS
    return bool(url.strip())


SETTINGS: tuple[Setting, ...] = (
    Setting(
        "rig", "name", Kind.STR, "taprig", "",
        "name of this rig, used to announce and find it on the local network",
        allowed="1 to 63 letters, digits or hyphens, not starting or ending with a hyphen "
        "(a DNS label, RFC 1123)",
        check=lambda s: _RIG_NAME.fullmatch(s) is not None,
    ),
    Setting(
        "device", "url", Kind.STR, "virtual", "",
        'where the device is: a pyserial port or URL, or "virtual" (a built-in simulated '
        'rig on a pseudo-terminal), "virtual:text" (the same, printing text), "virtual:tcp" '
        "(the same over a loopback TCP socket)",
        allowed='a serial port or pyserial URL (e.g. "/dev/ttyACM0", '
        '"socket://192.168.4.1:5000") or one of "virtual", "virtual:text", "virtual:tcp"',
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
        f"folder; the environment variable {DATA_DIR_ENV} replaces the file's value",
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
)  # fmt: skip


def _is_ip(text: str) -> bool:
    try:
        ipaddress.ip_address(text)
    except ValueError:
        return False
    return True


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


def _channel(index: int, role: Role, label: str, sensitivity: float, unit: str) -> ChannelSpec:
    return ChannelSpec(
        index=index,
        role=role,
        label=label,
        sensitivity=sensitivity,
        sensitivity_unit=_UNITS[unit],
        si_per_volt=si_per_volt(sensitivity, unit),
    )


VIRTUAL_CHANNELS: tuple[ChannelSpec, ...] = (
    # the built-in virtual instrument's channels (firmware_protocol/virtual/instrument.py)
    _channel(0, Role.FORCE, "hammer", 2.25, "mV/N"),
    _channel(1, Role.RESPONSE, "acc1", 1.02, "mV/(m/s^2)"),
    _channel(2, Role.RESPONSE, "acc2", 1.02, "mV/(m/s^2)"),
)
"""Channels used when device.url is a virtual one and the file configures none."""


@dataclass(frozen=True, slots=True)
class RigConfig:
    """[rig]: name is the rig's name on the local network."""

    name: str


@dataclass(frozen=True, slots=True)
class DeviceConfig:
    """[device]: the link. baudrate in bit/s, text_rate_hz in Hz (0: from the stream),
    text_full_scale_v in V, stall_s in s."""

    url: str
    format: StreamFormat
    baudrate: int
    text_rate_hz: float
    text_full_scale_v: float
    stall_s: float

    @property
    def is_virtual(self) -> bool:
        """True when the daemon runs its own virtual instrument (url in VIRTUAL_URLS)."""
        return self.url in VIRTUAL_URLS


@dataclass(frozen=True, slots=True)
class CaptureConfig:
    """[capture]: block and pretrigger in samples; *_n in N; *_fraction and
    full_scale_margin are fractions (0..1); ring_seconds in s."""

    block: int
    pretrigger: int
    trigger_level_n: float
    trigger_slope: TriggerSlope
    hysteresis_n: float
    averages: int
    accept: AcceptMode
    force_floor_n: float
    full_scale_margin: float
    double_hit_fraction: float
    decay_warning_fraction: float
    ring_seconds: float


@dataclass(frozen=True, slots=True)
class WindowsConfig:
    """[windows]: force_margin_s and force_taper_s in s; exponential_end is the exponential
    window's value at the record's last sample, None for no exponential window."""

    force_margin_s: float
    force_taper_s: float
    exponential_end: float | None


@dataclass(frozen=True, slots=True)
class StoreConfig:
    """[store]: data_dir is always absolute; min_free_mb in MB (10^6 bytes)."""

    data_dir: Path
    min_free_mb: int


@dataclass(frozen=True, slots=True)
class ServiceConfig:
    """[service]: where the HTTP service listens, its request size limit (KiB), mDNS on/off."""

    bind: str
    port: int
    max_request_kb: int
    advertise: bool
    announce_on: str

    @property
    def announce_addresses(self) -> list[str]:
        """The interface addresses to announce on; empty for all."""
        return [a.strip() for a in self.announce_on.split(",") if a.strip()]


_SECTION_TYPES: dict[str, type[Any]] = {
    "rig": RigConfig,
    "device": DeviceConfig,
    "capture": CaptureConfig,
    "windows": WindowsConfig,
    "store": StoreConfig,
    "service": ServiceConfig,
}


@dataclass(frozen=True, slots=True)
class Config:
    """The whole configuration. channels are sorted by device index.

    source: the file it was read from (None: defaults and overrides only); not compared.
    """

    rig: RigConfig
    device: DeviceConfig
    channels: tuple[ChannelSpec, ...]
    capture: CaptureConfig
    windows: WindowsConfig
    store: StoreConfig
    service: ServiceConfig
    source: Path | None = field(default=None, compare=False)

    def channels_of(self, role: Role) -> tuple[ChannelSpec, ...]:
        """The channels with `role`, in device index order."""
        return tuple(c for c in self.channels if c.role is role)

    @property
    def force_channel(self) -> ChannelSpec:
        """The one force (hammer) channel."""
        return self.channels_of(Role.FORCE)[0]

    @property
    def response_channels(self) -> tuple[ChannelSpec, ...]:
        """The response (accelerometer) channels, in device index order."""
        return self.channels_of(Role.RESPONSE)

    def check_rate(self, rate_hz: float) -> None:
        """Checks that need the device's sample rate (Hz), known only once it streams.

        The ring buffer must hold at least two records: ring_seconds ≥ 2 · block / rate.
        """
        need_s = 2.0 * self.capture.block / rate_hz
        if self.capture.ring_seconds < need_s:
            raise ConfigError(
                f"capture.ring_seconds = {_show(self.capture.ring_seconds)}: must be at least "
                f"2 × capture.block / rate = 2 × {self.capture.block} / {rate_hz:g} Hz "
                f"= {need_s:g} s"
            )


@dataclass(frozen=True, slots=True)
class _Raw:
    """A value for a setting before it is checked: from the file, environment or overrides."""

    value: object  # a TOML value, or text when from_text
    from_text: bool
    where: str  # appended to messages, e.g. " (in /etc/taprigd.toml)"
    base_dir: Path  # relative paths are resolved against this folder


def load_config(
    path: Path | None,
    overrides: Sequence[str] = (),
    environ: Mapping[str, str] | None = None,
) -> Config:
    """Read the configuration: defaults, then `path` (TOML; None: no file), then the
    environment (`environ`, default os.environ; only TAPRIG_DATA_DIR), then `overrides`
    ("section.key=value", later ones win). Raises ConfigError on any mistake."""
    env = os.environ if environ is None else environ
    raw: dict[str, _Raw] = {}
    channel_tables: list[object] | None = None
    file_where = ""
    if path is not None:
        file_where = f" (in {path})"
        channel_tables = _gather_file(_read_toml(path), raw, file_where, path.absolute().parent)
    env_dir = env.get(DATA_DIR_ENV, "")
    if env_dir:
        where = f" (from environment variable {DATA_DIR_ENV})"
        raw["store.data_dir"] = _Raw(env_dir, True, where, Path.cwd())
    for text in overrides:
        setting, value = _split_override(text)
        raw[setting.name] = _Raw(value, True, " (command-line override)", Path.cwd())

    values: dict[str, dict[str, Any]] = {section: {} for section in _SECTION_TYPES}
    where_of: dict[str, str] = {}
    for s in SETTINGS:
        r = raw.get(s.name)
        if r is None:
            values[s.section][s.key] = s.default
            where_of[s.name] = " (default)"
        else:
            values[s.section][s.key] = s.parse(
                r.value, from_text=r.from_text, where=r.where, base_dir=r.base_dir
            )
            where_of[s.name] = r.where
    sections = {name: cls(**values[name]) for name, cls in _SECTION_TYPES.items()}
    device: DeviceConfig = sections["device"]
    capture: CaptureConfig = sections["capture"]
    _check_together(device, capture, where_of)
    return Config(
        rig=sections["rig"],
        device=device,
        channels=_channels(channel_tables, device, file_where),
        capture=capture,
        windows=sections["windows"],
        store=sections["store"],
        service=sections["service"],
        source=path,
    )


def _read_toml(path: Path) -> dict[str, Any]:
    try:
        with path.open("rb") as f:
            return tomllib.load(f)
    except tomllib.TOMLDecodeError as exc:  # its message ends "(at line L, column C)"
        raise ConfigError(f"config file {path}: not valid TOML: {exc}") from None
    except UnicodeDecodeError as exc:
        raise ConfigError(f"config file {path}: not valid TOML: not UTF-8 text ({exc})") from None
    except OSError as exc:
        raise ConfigError(f"config file {path}: cannot be read: {exc.strerror}") from None


def _gather_file(
    doc: dict[str, Any], raw: dict[str, _Raw], where: str, base_dir: Path
) -> list[object] | None:
    """Put the file's scalar settings into `raw`; return its [[channels]] tables, if any."""
    channel_tables: list[object] | None = None
    for section, body in doc.items():
        if section == "channels":
            if not isinstance(body, list):
                raise ConfigError(
                    f"channels = {_show(body)}: must be an array of tables, one [[channels]] "
                    f"table per device channel (note the double brackets){where}"
                )
            channel_tables = body
            continue
        if section not in _SECTION_KEYS:
            if not isinstance(body, dict):
                raise ConfigError(
                    f"{section} = {_show(body)}: unknown setting; settings belong in a section"
                    f"{_suggest_name(section)}{where}"
                )
            raise ConfigError(f"[{section}]: unknown section{_suggest_section(section)}{where}")
        if not isinstance(body, dict):
            raise ConfigError(
                f"{section} = {_show(body)}: must be a table, written [{section}]{where}"
            )
        for key, value in body.items():
            name = f"{section}.{key}"
            if name not in _BY_NAME:
                raise ConfigError(
                    f"{name} = {_show(value)}: unknown setting{_suggest_key(section, key)}{where}"
                )
            raw[name] = _Raw(value, False, where, base_dir)
    return channel_tables


def _split_override(text: str) -> tuple[Setting, str]:
    name, sep, value = text.partition("=")
    name = name.strip()
    if not sep or not name:
        raise ConfigError(
            f"override {text!r}: must be written section.key=value, e.g. capture.block=8192"
        )
    if name == "channels" or name.startswith(("channels.", "channels[")):
        raise ConfigError(
            f"override {name} = {value.strip()}: channels cannot be set from the command line; "
            "edit the [[channels]] tables of the config file"
        )
    setting = _BY_NAME.get(name)
    if setting is None:
        raise ConfigError(
            f"override {name} = {value.strip()}: unknown setting{_suggest_name(name)}"
        )
    return setting, value


def _closest(word: str, candidates: Sequence[str]) -> str | None:
    found = difflib.get_close_matches(word, candidates, n=1, cutoff=0.6)
    return found[0] if found else None


def _suggest_section(section: str) -> str:
    sections = [*_SECTION_KEYS, "channels"]
    best = _closest(section, sections)
    if best == "channels":
        return "; did you mean [[channels]]?"
    if best is not None:
        return f"; did you mean [{best}]?"
    return "; sections are " + ", ".join(f"[{s}]" for s in _SECTION_KEYS) + ", [[channels]]"


def _suggest_key(section: str, key: str) -> str:
    best = _closest(key, _SECTION_KEYS[section])
    if best is not None:
        return f"; did you mean {section}.{best}?"
    elsewhere = _suggest_name(key)  # perhaps a key of another section
    if elsewhere:
        return elsewhere
    return f"; [{section}] has " + ", ".join(_SECTION_KEYS[section])


def _suggest_name(name: str) -> str:
    """A "did you mean section.key?" hint for a dotted or bare name; "" if nothing is close."""
    best = _closest(name, list(_BY_NAME))
    if best is None:
        key = name.rpartition(".")[2]
        same_key = [n for n in _BY_NAME if n.endswith("." + key)]
        if same_key:
            best = same_key[0]
        else:
            close_key = _closest(key, [n.partition(".")[2] for n in _BY_NAME])
            best = next((n for n in _BY_NAME if n.endswith(f".{close_key}")), None)
    return f"; did you mean {best}?" if best is not None else ""


def _check_together(device: DeviceConfig, capture: CaptureConfig, where: Mapping[str, str]) -> None:
    """Checks of settings that depend on each other."""
    if not capture.pretrigger < capture.block // 2:
        raise ConfigError(
            f"capture.pretrigger = {capture.pretrigger}: must be from 0 to "
            f"{capture.block // 2 - 1}, below half of capture.block = {capture.block}"
            f"{where['capture.pretrigger']}"
        )
    if not capture.hysteresis_n < capture.trigger_level_n:
        raise ConfigError(
            f"capture.hysteresis_n = {_show(capture.hysteresis_n)}: must be ≥ 0 and below "
            f"capture.trigger_level_n = {_show(capture.trigger_level_n)}"
            f"{where['capture.hysteresis_n']}"
        )
    if device.url == "virtual:text" and device.format is not StreamFormat.TEXT:
        raise ConfigError(
            f'device.format = "{device.format}": must be "text" with device.url = '
            f'"virtual:text", whose virtual instrument prints text{where["device.format"]}'
        )


def _channels(
    tables: list[object] | None, device: DeviceConfig, where: str
) -> tuple[ChannelSpec, ...]:
    """ChannelSpecs from the [[channels]] tables, sorted by index; virtual defaults if none."""
    if not tables:
        if device.is_virtual:
            return VIRTUAL_CHANNELS
        raise ConfigError(
            f"channels: none configured; device.url = {_show(device.url)} is a real device, so "
            "the channels must be configured: one [[channels]] table per channel used, with "
            f"{', '.join(_CHANNEL_KEYS)} (see deploy/taprigd.example.toml){where}"
        )
    specs: list[ChannelSpec] = []
    for i, table in enumerate(tables):
        label = f"channels[{i}]"
        if not isinstance(table, dict):
            raise ConfigError(
                f"{label} = {_show(table)}: must be a table, written [[channels]]{where}"
            )
        for key, value in table.items():
            if key not in _CHANNEL_KEYS:
                best = _closest(key, _CHANNEL_KEYS)
                hint = (
                    f"; did you mean {label}.{best}?"
                    if best
                    else "; a channel has " + ", ".join(_CHANNEL_KEYS)
                )
                raise ConfigError(f"{label}.{key} = {_show(value)}: unknown setting{hint}{where}")
        got: dict[str, Any] = {}
        for s in CHANNEL_SETTINGS:
            if s.key not in table:
                raise ConfigError(f"{label}.{s.key}: missing; must be {s.allowed_text}{where}")
            got[s.key] = s.parse(table[s.key], label=f"{label}.{s.key}", where=where)
        role: Role = got["role"]
        unit: str = got["unit"]
        if _UNITS[unit] not in _UNITS_FOR_ROLE[role]:
            allowed = ", ".join(
                f'"{u}"' + (' (also written "mV/(m/s²)" or "mV/ms2")' if u == "mV/(m/s^2)" else "")
                for u in _UNITS_FOR_ROLE[role]
            )
            raise ConfigError(
                f"{label}.unit = {_show(unit)}: must be {'one of ' if ',' in allowed else ''}"
                f"{allowed} for a {role} channel{where}"
            )
        spec = _channel(got["index"], role, got["label"], got["sensitivity"], unit)
        for j, other in enumerate(specs):
            if other.index == spec.index:
                raise ConfigError(
                    f"{label}.index = {spec.index}: must be unique; channels[{j}] already has "
                    f"index {other.index}{where}"
                )
            if other.label.lower() == spec.label.lower():
                raise ConfigError(
                    f"{label}.label = {_show(spec.label)}: must be unique (ignoring case); "
                    f"channels[{j}] is already labelled {_show(other.label)}{where}"
                )
            if other.role is Role.FORCE and spec.role is Role.FORCE:
                raise ConfigError(
                    f'{label}.role = "force": exactly one channel must have role "force"; '
                    f"channels[{j}] ({_show(other.label)}) already has it{where}"
                )
        specs.append(spec)
    if not any(s.role is Role.FORCE for s in specs):
        raise ConfigError(
            f'channels: no channel has role "force"; exactly one must (the hammer){where}'
        )
    if not any(s.role is Role.RESPONSE for s in specs):
        raise ConfigError(
            f'channels: no channel has role "response"; at least one must (an accelerometer){where}'
        )
    return tuple(sorted(specs, key=lambda s: s.index))
