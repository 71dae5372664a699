"""The ``[[channels]]`` tables: one ChannelSpec each, checked alone and together.

Exactly one channel is the force (the hammer), at least one a response; indices and labels
are unique. Without any table, a simulated device gets its built-in channels.
"""

from __future__ import annotations

from typing import Any

from ..errors import ConfigError
from ..records import ChannelSpec, Role
from .setting import _closest, _show
from .table import (
    _CHANNEL_KEYS,
    _UNITS,
    _UNITS_FOR_ROLE,
    CHANNEL_SETTINGS,
    SIMULATED_CHANNELS,
    _channel,
)


def channels(
    tables: list[object] | None, simulated: bool, url: str, where: str
) -> tuple[ChannelSpec, ...]:
    """ChannelSpecs from the [[channels]] tables, sorted by index; simulated defaults if none."""
    if not tables:
        if simulated:
            return SIMULATED_CHANNELS
        raise ConfigError(
            f"channels: none configured; device.url = {_show(url)} is a real device, so "
            "the channels must be configured: one [[channels]] table per channel used, with "
            f"{', '.join(_CHANNEL_KEYS)} (see deploy/taprigd.example.toml){where}"
        )
    specs: list[ChannelSpec] = []
    wrong: list[str] = []  # every table's mistakes, reported together
    for i, table in enumerate(tables):
        try:
            spec = _one(f"channels[{i}]", table, where)
            _check_unique(f"channels[{i}]", spec, specs, where)
            specs.append(spec)
        except ConfigError as exc:
            wrong.append(str(exc))
    if wrong:
        raise ConfigErrors(wrong)
    if not any(s.role is Role.FORCE for s in specs):
        raise ConfigError(
            f'channels: no channel has role "force"; exactly one must (the hammer){where}'
        )
    if not any(s.role is Role.RESPONSE for s in specs):
        raise ConfigError(
            f'channels: no channel has role "response"; at least one must (an accelerometer){where}'
        )
    return tuple(sorted(specs, key=lambda s: s.index))


class ConfigErrors(ConfigError):
    """Several mistakes at once; `messages` one line each."""

    def __init__(self, messages: list[str]) -> None:
        super().__init__("\n".join(messages))
        self.messages = messages


def _one(label: str, table: object, where: str) -> ChannelSpec:
    """One [[channels]] table: known keys only, each value allowed, the unit fit for the role."""
    if not isinstance(table, dict):
        raise ConfigError(f"{label} = {_show(table)}: must be a table, written [[channels]]{where}")
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
            if s.default is None:
                raise ConfigError(f"{label}.{s.key}: missing; must be {s.allowed_text}{where}")
            got[s.key] = s.default
            continue
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
    if role is Role.FORCE and "location" in table:
        raise ConfigError(f"{label}.location: only response channels have a location; the "
                          f"hammer moves (or, roving the sensor, strikes the test's reference)"
                          f"{where}")  # fmt: skip
    return _channel(got["index"], role, got["label"], got["sensitivity"], unit,
                    got["location"], got["direction"])  # fmt: skip


def _check_unique(label: str, spec: ChannelSpec, specs: list[ChannelSpec], where: str) -> None:
    """Index and label unique (labels ignoring case); one force channel at most."""
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
