"""Paired rigs: where each lives and its token, kept in the user's config directory.

One JSON file, ``<config>/taprig/rigs.json`` (mode 0600, written atomically), maps a rig's
stable id to its name, address and token. Mirrors live in ``<data>/taprig/mirrors/<id>.sqlite3``.
`<config>` and `<data>` follow the XDG base directory convention (``$XDG_CONFIG_HOME``, else
``~/.config``; ``$XDG_DATA_HOME``, else ``~/.local/share``) and can be replaced as a whole by
``TAPRIG_HOME`` (both under it); `Places` takes the environment as a mapping, so tests pass a
dict instead of patching os.environ.
"""

from __future__ import annotations

import json
import os
import urllib.parse
from collections.abc import Mapping
from dataclasses import asdict, dataclass
from pathlib import Path

from .errors import PairingError


@dataclass(frozen=True, slots=True)
class Places:
    """The client's folders: `config` holds rigs.json, `data` holds the mirrors."""

    config: Path
    data: Path

    @classmethod
    def from_env(cls, environ: Mapping[str, str] | None = None) -> Places:
        env = os.environ if environ is None else environ
        home = Path(env.get("HOME") or Path.home())
        if env.get("TAPRIG_HOME"):
            root = Path(env["TAPRIG_HOME"])
            return cls(root / "config", root / "data")
        config = Path(env.get("XDG_CONFIG_HOME") or home / ".config") / "taprig"
        data = Path(env.get("XDG_DATA_HOME") or home / ".local" / "share") / "taprig"
        return cls(config, data)

    @property
    def rigs_file(self) -> Path:
        return self.config / "rigs.json"

    def mirror_path(self, rig_id: str) -> Path:
        return self.data / "mirrors" / f"{rig_id}.sqlite3"


@dataclass(frozen=True, slots=True)
class PairedRig:
    """One paired rig: stable id, name (as last seen), base URL and token."""

    rig_id: str
    name: str
    url: str
    token: str


def parse_pairing_url(url: str) -> tuple[str, str]:
    """(base URL, token) of a pairing address ``http://host:port/pair#token=<token>``."""
    parts = urllib.parse.urlsplit(url.strip())
    token = urllib.parse.parse_qs(parts.fragment).get("token", [""])[0]
    if parts.scheme != "http" or not parts.netloc:
        raise PairingError(f"{url!r} is not a pairing address (http://host:port/pair#token=...)")
    if not token:
        raise PairingError(f"{url!r} carries no token (it should end in #token=...)")
    return f"http://{parts.netloc}", token


class RigBook:
    """The paired rigs of one user (rigs.json)."""

    def __init__(self, places: Places) -> None:
        self.places = places

    def all(self) -> list[PairedRig]:
        path = self.places.rigs_file
        try:
            raw = json.loads(path.read_text(encoding="utf-8"))
        except FileNotFoundError:
            return []
        except (OSError, ValueError) as exc:
            raise PairingError(f"{path} cannot be read ({exc}); pair the rigs again") from None
        try:
            return [PairedRig(**entry) for entry in raw.get("rigs", [])]
        except TypeError:
            raise PairingError(f"{path} is not a rigs file; pair the rigs again") from None

    def save(self, rig: PairedRig) -> None:
        """Add or replace `rig` (by id); the file is written with mode 0600, atomically."""
        rigs = [r for r in self.all() if r.rig_id != rig.rig_id] + [rig]
        self.places.config.mkdir(parents=True, exist_ok=True)
        path = self.places.rigs_file
        tmp = path.with_suffix(".tmp")
        text = json.dumps({"rigs": [asdict(r) for r in rigs]}, indent=1) + "\n"
        fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600)
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, 0o600)  # an existing tmp keeps its mode through O_CREAT
        os.replace(tmp, path)

    def find(self, which: str | None) -> PairedRig:
        """The paired rig named or identified by `which`; the only one when `which` is None."""
        rigs = self.all()
        if not rigs:
            raise PairingError(
                "no rig is paired; run `taprig pair URL` with a rig's pairing address"
            )
        if which is None:
            if len(rigs) == 1:
                return rigs[0]
            names = ", ".join(f"{r.name} ({r.rig_id})" for r in rigs)
            raise PairingError(f"several rigs are paired ({names}); name one")
        hits = [r for r in rigs if which in (r.rig_id, r.name)]
        if len(hits) == 1:
            return hits[0]
        if not hits:
            raise PairingError(f"no paired rig is called {which!r}")
        raise PairingError(f"several paired rigs are called {which!r}; use the id")
