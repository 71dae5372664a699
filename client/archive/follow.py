"""The archive follower: one thread per rig pulls its changes into PostgreSQL.

Each rig's thread asks the rig who it is, opens its own database connection, takes the
rig's advisory lock (`RigWriter.try_lock`: another archive process, on this machine or
another, that already follows the rig keeps it; this one tries again every busy_retry_s),
then repeats a pass and a long-poll of the change feed. A pass reads the feed after the
archived cursor and stores each change in its own transaction with the cursor, fetching
point sets a few ahead (client/pull.py's `feed`, client/prefetch.py's `Prefetch`: bodies
verified against the rig's Content-Digest and decoded strictly before they are stored).

Any failure — the rig unreachable, the database restarting, full or refusing — ends the
session: the connection is closed (releasing the lock), the error is logged and shown in
the rig's state, and after a back-off (0.5, 1, 2, then every 5 s) a new session starts from
the archived cursor. One rig's trouble never touches the other threads.
"""

from __future__ import annotations

import contextlib
import logging
import os
import socket
import threading
import time
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from typing import Any, Final

from taprig.schema import records

from ..errors import ClientError
from ..prefetch import Prefetch
from ..pull import RECONNECT_S, feed
from ..remote import RigClient
from .config import ArchiveConfig, RigSource
from .db import ArchiveError, redact
from .store import RigWriter

log = logging.getLogger(__name__)

JOIN_S: Final = 60.0  # longest wait for a rig's thread at stop (a long-poll returning)

Event = Callable[[dict[str, Any]], None]
"""on_event(one JSON-ready dict): a point set stored, a state change, an error."""


@dataclass(slots=True)
class RigState:
    """What one rig's thread is doing; `stored` and `bytes` count this process's work."""

    label: str
    url: str
    rig_id: str = ""
    name: str = ""
    state: str = "starting"  # following | idle | waiting (another process follows) | error
    cursor: int = 0
    stored: int = 0
    skipped: int = 0
    bytes: int = 0
    last_error: str | None = None
    since: float = field(default_factory=time.time)


def follower_name() -> str:
    """host:pid, recorded beside each rig as the process that follows it."""
    return f"{socket.gethostname()}:{os.getpid()}"


class RigThread:
    """Follows one rig until `stop` is set (or for one pass with once=True)."""

    def __init__(
        self,
        cfg: ArchiveConfig,
        source: RigSource,
        stop: threading.Event,
        on_event: Event,
        once: bool = False,
    ) -> None:
        self.cfg, self.source, self.stop, self.on_event, self.once = (
            cfg,
            source,
            stop,
            on_event,
            once,
        )
        self.state = RigState(source.label, source.url)
        self.thread = threading.Thread(target=self.run, name=f"archive-{source.label}", daemon=True)

    def run(self) -> None:
        failures = 0
        while not self.stop.is_set():
            try:
                self._session()
                failures = 0
                if self.once:
                    return
            except ClientError as exc:  # the rig, the transfer or the database: say so, retry
                self._failed(exc, failures)
                if self.once:
                    return
                delay = RECONNECT_S[min(failures, len(RECONNECT_S) - 1)]
                failures += 1
                self.stop.wait(delay)
            except Exception as exc:  # a bug: logged with its trace, and the thread goes on
                log.exception("archive: rig %s", self.source.label)
                self._failed(ClientError(f"unexpected {type(exc).__name__}: {exc}"), failures)
                failures += 1
                self.stop.wait(RECONNECT_S[-1])

    def _failed(self, exc: ClientError, failures: int) -> None:
        message = str(exc)
        if message != self.state.last_error or failures == 0:
            log.warning("archive: rig %s: %s", self.state.name or self.source.label, message)
        else:
            log.debug("archive: rig %s: %s (again)", self.source.label, message)
        self._set("error", last_error=message)
        self.on_event(
            {
                "event": "error",
                "rig": self.source.label,
                "rig_id": self.state.rig_id,
                "error": message,
            }
        )

    def _set(self, state: str, **fields: Any) -> None:
        if state != self.state.state:
            self.state.since = time.time()
        self.state.state = state
        for key, value in fields.items():
            setattr(self.state, key, value)

    def _session(self) -> None:
        with RigClient(self.source.url, self.source.token) as client:
            info = client.info()
            self._set(self.state.state, rig_id=info.rig_id, name=info.name)
            writer = RigWriter(self.cfg.dsn, info.rig_id, follower_name())
            try:
                while not writer.try_lock():
                    self._set("waiting")
                    if self.once or self.stop.wait(self.cfg.busy_retry_s):
                        return
                cursor = writer.bind(info.name, client.url)
                self._set("following", cursor=cursor, last_error=None)
                while not self.stop.is_set():
                    cursor = self._pass(client, writer, cursor)
                    writer.note(None)
                    self._set("idle", cursor=cursor, last_error=None)
                    if self.once or self.stop.is_set():
                        return
                    client.changes(cursor, wait_s=self.cfg.wait_s)  # returns early on a change
            except ClientError as exc:
                self._note_quietly(writer, str(exc))
                raise
            finally:
                writer.close()

    @staticmethod
    def _note_quietly(writer: RigWriter, error: str) -> None:
        # The database itself may be what failed: then there is nothing to record.
        with contextlib.suppress(ArchiveError):
            writer.note(error)

    def _pass(self, client: RigClient, writer: RigWriter, cursor: int) -> int:
        """Store every change after `cursor`, each in its own transaction; the new cursor."""
        changes = feed(client, cursor)
        if not changes:
            return cursor
        self._set("following")
        tests = {t.name: t for t in client.tests()}
        known: set[str] = set()
        ids = [c.point_set_id for c in changes if c.point_set_id is not None]
        with Prefetch(client, ids) as bodies:
            for change in changes:
                if self.stop.is_set():
                    break
                test = tests.get(change.test) or client.test(change.test)
                if change.point_set_id is None:
                    writer.put_test(test, change.seq)
                    known.add(test.name)
                else:
                    ps = bodies.take(change.point_set_id)
                    fresh = test.name not in known and not writer.has_test(test.name)
                    known.add(test.name)
                    new = writer.put_point_set(ps, change.seq, test if fresh else None)
                    self._stored(ps.summary, len(ps.body), new)
                cursor = change.seq
                self.state.cursor = cursor
        return cursor

    def _stored(self, s: records.WirePointSetSummary, size: int, new: bool) -> None:
        if new:
            self.state.stored += 1
            self.state.bytes += size
        else:
            self.state.skipped += 1
        self.on_event(
            {
                "event": "stored" if new else "already_here",
                "rig": self.state.name,
                "rig_id": self.state.rig_id,
                "test": s.test,
                "point": s.point,
                "version": s.version,
                "id": s.id,
                "seq": s.seq,
                "bytes": size,
            }
        )


class Archiver:
    """Every configured rig followed by a thread of its own. `stop()` ends them all."""

    def __init__(
        self, cfg: ArchiveConfig, on_event: Event | None = None, once: bool = False
    ) -> None:
        self.cfg = cfg
        self._stop = threading.Event()
        self._lock = threading.Lock()
        self._events = on_event or (lambda _e: None)
        self.rigs = [RigThread(cfg, s, self._stop, self._event, once) for s in cfg.rigs]

    def _event(self, event: dict[str, Any]) -> None:
        with self._lock:  # one writer at a time on the caller's stream
            self._events(event)

    def start(self) -> Archiver:
        log.info("archive: following %d rig(s) into %s", len(self.rigs), redact(self.cfg.dsn))
        for r in self.rigs:
            r.thread.start()
        return self

    def stop(self) -> None:
        """Ask every rig's thread to stop and wait for them (a long-poll may run to its end)."""
        self._stop.set()
        deadline = time.monotonic() + JOIN_S
        for r in self.rigs:
            r.thread.join(max(0.0, deadline - time.monotonic()))

    def wait(self, timeout: float | None = None) -> bool:
        """Wait until every thread has ended (once=True); True when they all have."""
        deadline = None if timeout is None else time.monotonic() + timeout
        for r in self.rigs:
            r.thread.join(None if deadline is None else max(0.0, deadline - time.monotonic()))
        return not any(r.thread.is_alive() for r in self.rigs)

    def status(self) -> dict[str, Any]:
        """JSON-ready: the database (without password) and each rig's state."""
        return {
            "database": redact(self.cfg.dsn),
            "follower": follower_name(),
            "rigs": [asdict(r.state) for r in self.rigs],
        }
