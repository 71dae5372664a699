"""Token authentication of the rig's HTTP service.

One secret per rig: `state_dir/token`, 43 characters of ``A-Z a-z 0-9 - _``
(``secrets.token_urlsafe(32)``, 256 random bits). A workstation sends it on every request as
``Authorization: Bearer <token>`` (RFC 6750 §2.1). The operator hands it over by
``taprigd pair`` (daemon/pairing.py: a pairing URL, printed and drawn as a QR code).

The token file
--------------
- Made on first start with ``O_CREAT | O_EXCL`` and mode 0600, then ``fchmod`` to exactly 0600
  (a umask can only take bits away, and a strict one such as 0277 would leave 0400).
- Opened with ``O_NOFOLLOW`` and checked on the open descriptor: a regular file, owned by
  this user, no group or other permission bits, holding one token.
- **Group- or other-accessible → refused** (`AuthError`), not quietly chmod-ed: whoever could
  read it may have copied it, so mending the mode would keep a possibly leaked secret in use.
  The operator either makes a new one (``taprigd pair --rotate``, which never reads the old
  file) or, knowing nobody read it, restores ``chmod 600``. The same holds when the file
  changes that way while the daemon runs: every request is refused (503) until it is fixed.
- An *empty* file is the trace of a first start cut short before the write; no workstation
  can hold that token, so a new one is made in its place.
- `rotate` writes a new token to a temporary 0600 file in the same directory, fsyncs it and
  renames it over the old one (``os.replace``; atomic on POSIX), so a reader finds the old
  token or the new one, never a mix. Each check stats the file (one cached syscall) and
  reloads it when it changed, so a rotation from another process (``taprigd pair --rotate``
  while the daemon runs) also takes effect at the next request.

Failed attempts
---------------
Failures are counted per peer address; after `max_failures` (5) within `window_s` (60 s) the
peer's wrong or missing tokens are refused for `lockout_s` (60 s) with `AuthResult.LOCKED` (HTTP
429, `retry_after` for the Retry-After header). A request carrying the right token is never
locked out: several users may share one address (a shop behind NAT), and one misconfigured
client must not shut out the rest. A missing header is not an attempt and does not
count; neither does a success, which also does not wipe earlier failures (on a shared address
it would let one client clear another's record). With 256-bit tokens guessing is hopeless
anyway; the limit keeps a misconfigured or hostile client from filling logs and CPU. Times
come from `time.monotonic` (a wall-clock step must not lift or extend a lockout).
"""

from __future__ import annotations

import contextlib
import enum
import errno
import hmac
import ipaddress
import logging
import os
import re
import secrets
import stat
import threading
import time
from collections import deque
from dataclasses import dataclass, field
from pathlib import Path
from typing import Final

from .errors import TaprigError
from .redact import RedactingFilter, redact

log = logging.getLogger(__name__)

TOKEN_FILE: Final = "token"
"""Name of the token file in the state directory."""
TOKEN_BYTES: Final = 32
"""Random bytes in a token; `secrets.token_urlsafe` turns them into 43 characters."""
MAX_FAILURES: Final = 5
FAILURE_WINDOW_S: Final = 60.0
LOCKOUT_S: Final = 60.0
MAX_TRACKED_PEERS: Final = 4096
"""Peers whose failures are remembered; beyond it the oldest records are dropped."""

# A token as this module writes it or as an operator may have put it: URL-safe base64.
_TOKEN_RE: Final = re.compile(r"[A-Za-z0-9_-]{32,128}")
# RFC 6750 §2.1: credentials = "Bearer" 1*SP b64token; the scheme is case-insensitive
# (RFC 9110 §11.1). Plain spaces only: `\s` would also take Unicode spaces.
_BEARER_RE: Final = re.compile(r"[Bb][Ee][Aa][Rr][Ee][Rr] +([A-Za-z0-9._~+/-]+=*)[ \t]*")


class AuthError(TaprigError):
    """The token file is missing, unsafe or not a token; the message says what to do."""


class AuthResult(enum.Enum):
    """Outcome of `Auth.check`; true only for OK. `http_status` is the answer to give."""

    OK = "ok"
    MISSING = "missing"  # no Authorization header (not counted as a failure)
    MALFORMED = "malformed"  # not "Bearer <token>" (counted)
    WRONG = "wrong"  # a well-formed but wrong token (counted)
    LOCKED = "locked"  # too many failures from this peer: refused unless the token is right
    UNAVAILABLE = "unavailable"  # the token file went missing or unsafe since start

    def __bool__(self) -> bool:
        return self is AuthResult.OK

    @property
    def http_status(self) -> int:
        """200 for OK, 429 for LOCKED, 503 for UNAVAILABLE, else 401."""
        return {"ok": 200, "locked": 429, "unavailable": 503}.get(self.value, 401)


@dataclass(slots=True)
class _Peer:
    failures: deque[float] = field(default_factory=deque)  # monotonic times within the window
    locked_until: float = -1.0


_FileKey = tuple[int, int, int, int, int, int]


def _file_key(st: os.stat_result) -> _FileKey:
    # ctime and mode too: a chmod changes neither content nor mtime.
    return (st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns, st.st_mode)


def _read_token(path: Path) -> tuple[str, _FileKey]:
    """The token in `path` and the file's identity; AuthError if the file is not safe.

    An empty file gives "" (a first start cut short).
    """
    try:
        fd = os.open(path, os.O_RDONLY | os.O_NOFOLLOW | os.O_CLOEXEC)
    except OSError as exc:
        if exc.errno == errno.ELOOP:
            raise AuthError(
                f"{path} is a symbolic link; the token file must be a plain file"
            ) from exc
        raise AuthError(f"cannot open the token file {path}: {exc.strerror}") from exc
    try:
        # Checked on the open file, so nothing can be swapped between check and read.
        st = os.fstat(fd)
        mode = stat.S_IMODE(st.st_mode)
        if not stat.S_ISREG(st.st_mode):
            raise AuthError(f"{path} is not a regular file")
        if st.st_uid != os.geteuid():
            raise AuthError(
                f"{path} belongs to uid {st.st_uid}, not to this user (uid {os.geteuid()}); "
                "run taprigd as the user that owns it, or make a new token with "
                "`taprigd pair --rotate`"
            )
        if mode & 0o077:
            raise AuthError(
                f"{path} has mode {mode:04o}: group or others may have read the token. "
                "Make a new one with `taprigd pair --rotate` (workstations pair again), or, "
                f"if you are sure nobody read it, `chmod 600 {path}`"
            )
        raw = os.read(fd, 1024)
    finally:
        os.close(fd)
    text = raw.decode("ascii", "replace").strip()
    if raw and not _TOKEN_RE.fullmatch(text):
        raise AuthError(
            f"{path} does not hold a token (expected 32..128 characters of A-Z a-z 0-9 - _); "
            "make a new one with `taprigd pair --rotate`"
        )
    return text, _file_key(st)


def _write_all(fd: int, data: bytes) -> None:
    view = memoryview(data)
    while view:
        view = view[os.write(fd, view) :]


def _fsync_dir(directory: Path) -> None:
    # The rename or the new name is durable only once the directory itself is on disk.
    fd = os.open(directory, os.O_RDONLY | os.O_DIRECTORY | os.O_CLOEXEC)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _open_new_private(path: Path) -> int:
    flags = os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_NOFOLLOW | os.O_CLOEXEC
    fd = os.open(path, flags, 0o600)
    try:
        os.fchmod(fd, 0o600)  # exactly 0600 whatever the umask took away
    except BaseException:
        os.close(fd)
        raise
    return fd


def _create_token_file(path: Path, token: str) -> None:
    """Write `token` to the new file `path` (FileExistsError if it exists)."""
    fd = _open_new_private(path)
    try:
        _write_all(fd, f"{token}\n".encode("ascii"))
        os.fsync(fd)
    except BaseException:
        os.close(fd)
        path.unlink(missing_ok=True)
        raise
    os.close(fd)
    _fsync_dir(path.parent)


def _replace_token_file(path: Path, token: str) -> None:
    """Put `token` in `path` atomically: a private temporary file renamed over it."""
    tmp = path.with_name(f".{path.name}.{secrets.token_hex(8)}.tmp")
    fd = _open_new_private(tmp)
    try:
        try:
            _write_all(fd, f"{token}\n".encode("ascii"))
            os.fsync(fd)
        finally:
            os.close(fd)
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    _fsync_dir(path.parent)


def _peer_key(peer: str) -> str:
    """One spelling per address: ``::ffff:192.0.2.1`` and ``192.0.2.1`` count as one peer."""
    try:
        addr = ipaddress.ip_address(peer.split("%", 1)[0])
    except ValueError:
        return peer
    if isinstance(addr, ipaddress.IPv6Address) and addr.ipv4_mapped is not None:
        return str(addr.ipv4_mapped)
    return str(addr)


def _parse_bearer(authorization: str) -> str | None:
    m = _BEARER_RE.fullmatch(authorization.strip(" \t"))
    return m.group(1) if m else None


class Auth:
    """The rig's access token and the checks of presented credentials. Thread-safe.

    state_dir: directory of the token file (made 0700 if missing). AuthError if the token
    file is unsafe (see the module text). max_failures, window_s, lockout_s: the failure
    limit per peer (seconds on the monotonic clock).
    """

    def __init__(
        self,
        state_dir: Path,
        *,
        max_failures: int = MAX_FAILURES,
        window_s: float = FAILURE_WINDOW_S,
        lockout_s: float = LOCKOUT_S,
        max_peers: int = MAX_TRACKED_PEERS,
    ) -> None:
        if max_failures < 1 or window_s <= 0 or lockout_s <= 0 or max_peers < 1:
            raise ValueError("max_failures, window_s, lockout_s and max_peers must be positive")
        self.path = Path(state_dir) / TOKEN_FILE
        self.max_failures, self.window_s, self.lockout_s = max_failures, window_s, lockout_s
        self.max_peers = max_peers
        self._lock = threading.Lock()
        self._peers: dict[str, _Peer] = {}
        self._problem: str | None = None
        Path(state_dir).mkdir(mode=0o700, parents=True, exist_ok=True)
        self._token, self._key = self._load_or_create()

    # -- the token file

    def _load_or_create(self) -> tuple[str, _FileKey]:
        with contextlib.suppress(FileExistsError):
            _create_token_file(self.path, secrets.token_urlsafe(TOKEN_BYTES))
            log.info("made a new access token in %s", self.path)
        token, key = _read_token(self.path)
        if not token:
            log.warning("%s was empty (an interrupted first start); made a new token", self.path)
            _replace_token_file(self.path, secrets.token_urlsafe(TOKEN_BYTES))
            token, key = _read_token(self.path)
        return token, key

    def _current(self) -> str | None:
        """The token as the file holds it now; None (logged once) if it is gone or unsafe."""
        with self._lock:
            try:
                key = _file_key(os.stat(self.path, follow_symlinks=False))
                if key != self._key:
                    token, key = _read_token(self.path)
                    if not token:
                        raise AuthError(f"{self.path} is empty")
                    self._token, self._key = token, key
            except (OSError, AuthError) as exc:
                problem = str(exc) if isinstance(exc, AuthError) else f"{self.path}: {exc}"
                if problem != self._problem:
                    log.error("refusing every request: %s", problem)
                    self._problem = problem
                return None
            if self._problem is not None:
                log.info("token file %s is usable again", self.path)
                self._problem = None
            return self._token

    @property
    def token(self) -> str:
        """The current token (for pairing); AuthError if the file is gone or unsafe."""
        token = self._current()
        if token is None:
            raise AuthError(self._problem or f"{self.path} cannot be used")
        return token

    def rotate(self) -> str:
        """Replace the token with a new one (atomically, mode 0600) and return it.

        The old token fails from the next check on, in this process and in a daemon that
        shares the state directory.
        """
        token = secrets.token_urlsafe(TOKEN_BYTES)
        with self._lock:
            _replace_token_file(self.path, token)
            self._token = token
            self._key = _file_key(os.stat(self.path, follow_symlinks=False))
        log.info("access token rotated; workstations must pair again")
        return token

    # -- checking credentials

    def check(self, authorization: str | None, peer: str, now: float | None = None) -> AuthResult:
        """Judge one request's Authorization header from `peer` (its IP address, no port).

        now: monotonic time in seconds (`time.monotonic()` if None; tests pass their own).
        The token is compared with `hmac.compare_digest`, in time independent of where the
        two differ.
        """
        t = time.monotonic() if now is None else now
        key = _peer_key(peer)
        token = self._current()
        if token is None:
            return AuthResult.UNAVAILABLE
        presented = _parse_bearer(authorization) if authorization else None
        if presented is not None and hmac.compare_digest(
            presented.encode("ascii"), token.encode("ascii")
        ):
            # The right token always gets in: a lockout is for the peer address, and several
            # users (a shop behind one NAT address) may share it with a misconfigured client.
            return AuthResult.OK
        if self._locked(key, t):
            return AuthResult.LOCKED
        if not authorization:
            return AuthResult.MISSING
        self._fail(key, t)
        return AuthResult.MALFORMED if presented is None else AuthResult.WRONG

    def retry_after(self, peer: str, now: float | None = None) -> float:
        """Seconds until `peer` may try again (0.0 if it is not locked out)."""
        t = time.monotonic() if now is None else now
        with self._lock:
            rec = self._peers.get(_peer_key(peer))
            return max(0.0, rec.locked_until - t) if rec else 0.0

    def _locked(self, key: str, t: float) -> bool:
        with self._lock:
            rec = self._peers.get(key)
            if rec is None or rec.locked_until < 0:
                return False
            if t < rec.locked_until:
                return True
            del self._peers[key]  # lockout over: a clean slate
            return False

    def _fail(self, key: str, t: float) -> None:
        with self._lock:
            rec = self._peers.pop(key, None) or _Peer()
            self._peers[key] = rec  # re-inserted: the dict's order is by latest failure
            while rec.failures and rec.failures[0] <= t - self.window_s:
                rec.failures.popleft()
            rec.failures.append(t)
            if len(rec.failures) >= self.max_failures:
                rec.failures.clear()
                rec.locked_until = t + self.lockout_s
                log.warning(
                    "%d failed logins from %s within %g s: refusing it for %g s",
                    self.max_failures,
                    key,
                    self.window_s,
                    self.lockout_s,
                )
            if len(self._peers) > self.max_peers:
                self._prune(t)

    def _prune(self, t: float) -> None:
        for key in [
            k
            for k, r in self._peers.items()
            if r.locked_until <= t and (not r.failures or r.failures[-1] <= t - self.window_s)
        ]:
            del self._peers[key]
        while len(self._peers) > self.max_peers:  # still full: forget the longest quiet
            del self._peers[next(iter(self._peers))]

    # -- logs

    def redact(self, text: str) -> str:
        """`text` with the current token and anything token-like replaced (see `redact`)."""
        return redact(text, (self._token,))

    def log_filter(self) -> RedactingFilter:
        """A logging filter that redacts tokens; add it to the service's log handlers."""
        return RedactingFilter(lambda: (self._token,))


def replace_token_file(state_dir: Path) -> None:
    """Put a new token in `state_dir` without reading the old file (so this also mends an
    unsafe one); workstations paired before must pair again."""
    Path(state_dir).mkdir(mode=0o700, parents=True, exist_ok=True)
    _replace_token_file(Path(state_dir) / TOKEN_FILE, secrets.token_urlsafe(TOKEN_BYTES))
