"""How one setting is declared and parsed: its kind, default, allowed values and unit.

`Setting` turns a TOML value or an override's text into a checked Python value and, when it
is not allowed, a ConfigError naming the key, the value seen and what is allowed. The table
of every setting is daemon/config/table.py; loading is daemon/config/__init__.py.
"""

from __future__ import annotations

import difflib
import enum
import math
import os
import re
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Final

from ..errors import ConfigError

STANDARD_GRAVITY = 9.80665
"""Standard acceleration of free fall g_n in m/s², exact by definition (3rd CGPM, 1901;
restated in ISO 80000-3). Used to turn mV/g sensitivities into mV/(m/s²)."""

DATA_DIR_ENV = "TAPRIG_DATA_DIR"
"""Environment variable that, when set and non-empty, replaces store.data_dir of the file."""


class StreamFormat(enum.StrEnum):
    """How the device encodes its stream (firmware_protocol/PROTOCOL.md)."""

    BINARY = "binary"  # framed, CRC-checked (sections 1-3)
    TEXT = "text"  # one line of volts per sample frame (section 4)


class LinkReader(enum.StrEnum):
    """Where the device's port is read (daemon/capture/linkproc.py)."""

    PROCESS = "process"  # a small child process: the daemon's load cannot starve the port
    THREAD = "thread"  # a thread of the daemon: one process fewer, for a quiet rig


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
SIMULATED_URLS = ("simulated", "simulated:text", "simulated:tcp")
"""device.url values that make the daemon start its own simulated test piece."""
OLD_URLS: Final = {"virtual": "simulated", "virtual:text": "simulated:text",
                   "virtual:tcp": "simulated:tcp"}  # fmt: skip
"""device.url values of earlier releases, still read (with a warning) in this one."""


def _valid_url(url: str) -> bool:
    if url.startswith("simulated"):
        return url in SIMULATED_URLS
    return bool(url.strip())


def _closest(word: str, candidates: Sequence[str]) -> str | None:
    found = difflib.get_close_matches(word, candidates, n=1, cutoff=0.6)
    return found[0] if found else None


SYSTEM_DATA_DIR: Final = Path("/var/lib/taprig")


def default_data_dir(environ: Mapping[str, str], euid: int | None = None) -> Path:
    """store.data_dir when nothing sets it: /var/lib/taprig for root (the systemd install's
    unit names it too, as StateDirectory); for anyone else the XDG state folder,
    $XDG_STATE_HOME/taprig (an absolute $XDG_STATE_HOME only, as the XDG Base Directory
    Specification 0.8 says), else ~/.local/state/taprig. `euid`: default os.geteuid()."""
    if (os.geteuid() if euid is None else euid) == 0:
        return SYSTEM_DATA_DIR
    state = environ.get("XDG_STATE_HOME", "")
    if state and Path(state).is_absolute():
        return Path(state) / "taprig"
    home = environ.get("HOME") or str(Path.home())
    return Path(home) / ".local" / "state" / "taprig"
