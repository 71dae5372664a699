"""The archive follower's configuration: which database, which rigs, how patiently.

A TOML file (``taprig archive run --config FILE``)::

    dsn = "host=db.lab dbname=taprig user=archive password=..."  # else $TAPRIG_ARCHIVE_DSN
    wait_s = 25          # long-poll of each rig's change feed, seconds
    busy_retry_s = 10    # how often to try a rig another archive process is following, s

    [[rigs]]             # none listed: the rigs paired on this machine (`taprig pair`)
    name = "rig-3"       # optional: a label for messages until the rig answers
    url = "http://rig-3.lab:8470"
    token = "..."        # or token_file = "/etc/taprig/rig-3.token"

A file that holds a password or a token must be readable by its owner only (mode 0600, as
ssh insists for its keys): anything else is refused before a secret is used.
"""

from __future__ import annotations

import os
import stat
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Final

from psycopg import conninfo

from ..rigs import Places, RigBook
from .db import ArchiveError, resolve_dsn

WAIT_S: Final = 25.0
BUSY_RETRY_S: Final = 10.0
_KEYS: Final = frozenset({"dsn", "wait_s", "busy_retry_s", "rigs"})


@dataclass(frozen=True, slots=True)
class RigSource:
    """A rig to follow: its address and token, and a label for messages until it answers."""

    url: str
    token: str
    label: str

    def __repr__(self) -> str:  # never the token
        return f"RigSource({self.label!r}, {self.url!r})"


@dataclass(frozen=True, slots=True)
class ArchiveConfig:
    """dsn: where to store (with its password, if any: never print it; see db.redact)."""

    dsn: str
    rigs: tuple[RigSource, ...]
    wait_s: float = WAIT_S
    busy_retry_s: float = BUSY_RETRY_S

    def __repr__(self) -> str:
        return f"ArchiveConfig(<dsn>, {self.rigs!r}, {self.wait_s}, {self.busy_retry_s})"


def load(path: Path | None, environ: Mapping[str, str] | None = None) -> ArchiveConfig:
    """The configuration from `path` (None: DSN from the environment, the paired rigs)."""
    env = os.environ if environ is None else environ
    raw: dict[str, Any] = {}
    if path is not None:
        raw = _read(path)
    dsn = resolve_dsn(_opt_str(raw, "dsn", path), env)
    rigs = tuple(_rig(entry, i, path) for i, entry in enumerate(raw.get("rigs", [])))
    if not rigs:
        rigs = tuple(RigSource(r.url, r.token, r.name) for r in RigBook(Places.from_env(env)).all())
    if not rigs:
        raise ArchiveError(
            "no rigs to follow: list them under [[rigs]] in the configuration, "
            "or pair them on this machine (`taprig pair`)"
        )
    return ArchiveConfig(
        dsn,
        rigs,
        _seconds(raw, "wait_s", WAIT_S, path),
        _seconds(raw, "busy_retry_s", BUSY_RETRY_S, path),
    )


def _read(path: Path) -> dict[str, Any]:
    try:
        text = path.read_text(encoding="utf-8")
        mode = path.stat().st_mode
    except OSError as exc:
        raise ArchiveError(f"cannot read the archive configuration {path}: {exc}") from None
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ArchiveError(f"{path} is not TOML: {exc}") from None
    unknown = sorted(set(raw) - _KEYS)
    if unknown:
        raise ArchiveError(f"{path}: unknown key(s) {unknown}; allowed: {sorted(_KEYS)}")
    if _holds_secret(raw) and mode & (stat.S_IRWXG | stat.S_IRWXO):
        raise ArchiveError(
            f"{path} holds a password or token and is readable by others (mode "
            f"{stat.S_IMODE(mode):04o}): chmod 600 {path}"
        )
    return raw


def _holds_secret(raw: Mapping[str, Any]) -> bool:
    dsn = raw.get("dsn")
    if isinstance(dsn, str) and dsn:
        try:
            if conninfo.conninfo_to_dict(dsn).get("password"):
                return True
        except Exception:  # an unreadable DSN is reported later, by resolve_dsn
            return True
    rigs = raw.get("rigs", [])
    return isinstance(rigs, list) and any(isinstance(r, dict) and "token" in r for r in rigs)


def _opt_str(raw: Mapping[str, Any], key: str, path: Path | None) -> str | None:
    value = raw.get(key)
    if value is not None and not isinstance(value, str):
        raise ArchiveError(f"{path}: {key} must be a string")
    return value


def _seconds(raw: Mapping[str, Any], key: str, default: float, path: Path | None) -> float:
    value = raw.get(key, default)
    if isinstance(value, bool) or not isinstance(value, int | float) or not 0 < value <= 3600:
        raise ArchiveError(f"{path}: {key} = {value!r}; give seconds, 0 < {key} <= 3600")
    return float(value)


def _rig(entry: Any, i: int, path: Path | None) -> RigSource:
    where = f"{path}: rigs[{i}]"
    if not isinstance(entry, dict) or not isinstance(entry.get("url"), str):
        raise ArchiveError(f'{where} needs url = "http://host:port"')
    token = entry.get("token")
    if token is None and "token_file" in entry:
        token_path = Path(str(entry["token_file"]))
        try:
            mode = token_path.stat().st_mode
            token = token_path.read_text(encoding="utf-8").strip()
        except OSError as exc:
            raise ArchiveError(f"{where}: cannot read token_file: {exc}") from None
        if mode & (stat.S_IRWXG | stat.S_IRWXO):
            raise ArchiveError(
                f"{token_path} holds a token and is readable by others: chmod 600 {token_path}"
            )
    if not isinstance(token, str) or not token:
        raise ArchiveError(f'{where} needs token = "..." or token_file = "..."')
    return RigSource(entry["url"], token, str(entry.get("name", entry["url"])))
