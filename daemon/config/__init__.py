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

import dataclasses
import logging
import os
import tomllib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ..errors import ConfigError
from ..records import ChannelSpec, Role
from .channels import channels
from .problems import Problems
from .setting import (
    DATA_DIR_ENV,
    OLD_URLS,
    SIMULATED_URLS,
    STANDARD_GRAVITY,
    AcceptMode,
    Kind,
    LinkReader,
    Setting,
    StreamFormat,
    TriggerSlope,
    _closest,
    _show,
    default_data_dir,
)
from .table import (
    _BY_NAME,
    _SECTION_KEYS,
    CHANNEL_SETTINGS,
    SETTINGS,
    SIMULATED_CHANNELS,
    si_per_volt,
)

log = logging.getLogger(__name__)

__all__ = [
    "CHANNEL_SETTINGS",
    "DATA_DIR_ENV",
    "SETTINGS",
    "SIMULATED_CHANNELS",
    "SIMULATED_URLS",
    "STANDARD_GRAVITY",
    "AcceptMode",
    "CaptureConfig",
    "Config",
    "DeviceConfig",
    "Kind",
    "LinkReader",
    "RigConfig",
    "ServiceConfig",
    "Setting",
    "StoreConfig",
    "StreamFormat",
    "TriggerSlope",
    "WindowsConfig",
    "default_data_dir",
    "load_config",
    "si_per_volt",
]


@dataclass(frozen=True, slots=True)
class RigConfig:
    """[rig]: name is the rig's name on the local network."""

    name: str


@dataclass(frozen=True, slots=True)
class DeviceConfig:
    """[device]: the link. baudrate in bit/s, text_rate_hz in Hz (0: from the stream),
    text_full_scale_v in V, stall_s in s; reader: where the port is read."""

    url: str
    format: StreamFormat
    baudrate: int
    text_rate_hz: float
    text_full_scale_v: float
    stall_s: float
    reader: LinkReader

    @property
    def is_simulated(self) -> bool:
        """True when the daemon runs its own simulated test piece (url in SIMULATED_URLS)."""
        return self.url in SIMULATED_URLS


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
    """[service]: where the HTTP service listens, its request size limit (KiB), mDNS on/off,
    its connection cap and share per client address, its header and body deadlines (s)."""

    bind: str
    port: int
    max_request_kb: int
    advertise: bool
    announce_on: str
    max_connections: int
    connections_per_address: int
    header_timeout_s: float
    body_timeout_s: float

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


def _rename_old_url(raw: dict[str, _Raw]) -> None:
    """device.url's values of earlier releases still work in this one, with a warning."""
    r = raw.get("device.url")
    new = OLD_URLS.get(r.value) if r is not None and isinstance(r.value, str) else None
    if r is not None and new is not None:
        log.warning('device.url = "%s" is the old name of "%s"; write "%s", the old name '
                    "goes in the next release%s", r.value, new, new, r.where)  # fmt: skip
        raw["device.url"] = dataclasses.replace(r, value=new)


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
    problems = Problems()
    if path is not None:
        file_where = f" (in {path})"
        channel_tables = _gather_file(_read_toml(path), raw, file_where,
                                      path.absolute().parent, problems)  # fmt: skip
    env_dir = env.get(DATA_DIR_ENV, "")
    if env_dir:
        where = f" (from environment variable {DATA_DIR_ENV})"
        raw["store.data_dir"] = _Raw(env_dir, True, where, Path.cwd())
    for text in overrides:
        with problems.collect():
            setting, value = _split_override(text)
            raw[setting.name] = _Raw(value, True, " (command-line override)", Path.cwd())
    _rename_old_url(raw)
    values, where_of = _values(raw, problems)
    if "store.data_dir" not in raw:
        values["store"]["data_dir"] = default_data_dir(env)
    sections = {name: cls(**values[name]) for name, cls in _SECTION_TYPES.items()}
    device: DeviceConfig = sections["device"]
    capture: CaptureConfig = sections["capture"]
    _check_together(device, capture, where_of, problems)
    chans: tuple[ChannelSpec, ...] = ()
    with problems.collect():
        chans = channels(channel_tables, device.is_simulated, device.url, file_where)
    problems.raise_any()
    return Config(
        rig=sections["rig"],
        device=device,
        channels=chans,
        capture=capture,
        windows=sections["windows"],
        store=sections["store"],
        service=sections["service"],
        source=path,
    )


def _values(
    raw: Mapping[str, _Raw], problems: Problems
) -> tuple[dict[str, dict[str, Any]], dict[str, str]]:
    """Each setting's typed value (its default where the given one is wrong, so that the
    checks of the rest still run), and where it came from."""
    values: dict[str, dict[str, Any]] = {section: {} for section in _SECTION_TYPES}
    where_of: dict[str, str] = {}
    for s in SETTINGS:
        r = raw.get(s.name)
        values[s.section][s.key] = s.default
        where_of[s.name] = " (default)"
        if r is not None:
            with problems.collect():
                values[s.section][s.key] = s.parse(
                    r.value, from_text=r.from_text, where=r.where, base_dir=r.base_dir
                )
                where_of[s.name] = r.where
    return values, where_of


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
    doc: dict[str, Any], raw: dict[str, _Raw], where: str, base_dir: Path, problems: Problems
) -> list[object] | None:
    """Put the file's scalar settings into `raw`; return its [[channels]] tables, if any.
    Every mistake goes to `problems`, so one reading reports them all."""
    channel_tables: list[object] | None = None
    for section, body in doc.items():
        with problems.collect():
            if section == "channels":
                if not isinstance(body, list):
                    raise ConfigError(
                        f"channels = {_show(body)}: must be an array of tables, one [[channels]] "
                        f"table per device channel (note the double brackets){where}"
                    )
                channel_tables = body
                continue
            _check_section(section, body, where)
            for key, value in body.items():
                name = f"{section}.{key}"
                with problems.collect():
                    if name not in _BY_NAME:
                        raise ConfigError(f"{name} = {_show(value)}: unknown setting"
                                          f"{_suggest_key(section, key)}{where}")  # fmt: skip
                    raw[name] = _Raw(value, False, where, base_dir)
    return channel_tables


def _check_section(section: str, body: object, where: str) -> None:
    """A known section written as a table; ConfigError otherwise."""
    if section not in _SECTION_KEYS:
        if not isinstance(body, dict):
            raise ConfigError(
                f"{section} = {_show(body)}: unknown setting; settings belong in a section"
                f"{_suggest_name(section)}{where}"
            )
        raise ConfigError(f"[{section}]: unknown section{_suggest_section(section)}{where}")
    if not isinstance(body, dict):
        raise ConfigError(f"{section} = {_show(body)}: must be a table, written [{section}]{where}")


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


def _check_together(
    device: DeviceConfig, capture: CaptureConfig, where: Mapping[str, str], problems: Problems
) -> None:
    """Checks of settings that depend on each other; each mistake goes to `problems`."""
    if not capture.pretrigger < capture.block // 2:
        problems.add(
            f"capture.pretrigger = {capture.pretrigger}: must be from 0 to "
            f"{capture.block // 2 - 1}, below half of capture.block = {capture.block}"
            f"{where['capture.pretrigger']}"
        )
    if not capture.hysteresis_n < capture.trigger_level_n:
        problems.add(
            f"capture.hysteresis_n = {_show(capture.hysteresis_n)}: must be ≥ 0 and below "
            f"capture.trigger_level_n = {_show(capture.trigger_level_n)}"
            f"{where['capture.hysteresis_n']}"
        )
    if device.url == "simulated:text" and device.format is not StreamFormat.TEXT:
        problems.add(
            f'device.format = "{device.format}": must be "text" with device.url = '
            f'"simulated:text", whose simulated test piece prints text{where["device.format"]}'
        )
