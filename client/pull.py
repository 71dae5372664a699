"""Incremental pulls from a rig's change feed into its mirror, and following it (`watch`).

A whole pull reads the feed after the mirror's cursor, fetches every new test and point set
(bodies verified by checksum), and stores them in order in batches; each batch commits the
data and the cursor together. A pull for one test reads the same feed but fetches only that
test's point sets and leaves the cursor alone, so a later whole pull still sees every change
(and skips what is already here).
"""

from __future__ import annotations

import logging
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Final

from taprig.schema import records

from .mirror import Mirror, MirroredPointSet
from .prefetch import Prefetch
from .remote import RigClient, RigUnreachable

log = logging.getLogger(__name__)

BATCH_BYTES: Final = 16 << 20  # a batch commits after this many body bytes
BATCH_S: Final = 1.0  # ... or after this long, seconds
# Long-poll of the change feed while watching, seconds. Kept short: a SIGTERM that the kernel
# hands to one of numpy's BLAS threads is only acted on when the main thread's socket read
# returns, so the wait bounds how long `taprig watch` takes to stop.
WATCH_WAIT_S: Final = 5.0
RECONNECT_S: Final = (0.5, 1.0, 2.0, 5.0)  # waits between attempts to reach a lost rig

Progress = Callable[[int, int], None]
"""progress(point sets done, point sets to fetch)."""


@dataclass(slots=True)
class PullReport:
    """What one pull did: tests and point sets stored, already present, bytes, seconds."""

    tests: int = 0
    point_sets: int = 0
    already_here: int = 0
    bytes: int = 0
    seconds: float = 0.0
    cursor: int = 0
    new: list[records.WirePointSetSummary] = field(default_factory=list)

    @property
    def mb_per_s(self) -> float:
        return self.bytes / 1e6 / self.seconds if self.seconds > 0 else 0.0


def feed(client: RigClient, since: int) -> list[records.WireChange]:
    """Every change after `since`, in order (all pages)."""
    out: list[records.WireChange] = []
    while True:
        changes, last, more = client.changes(since)
        out.extend(changes)
        if not more or not changes:
            return out
        since = last


def pull(
    client: RigClient,
    mirror: Mirror,
    test: str | None = None,
    progress: Progress | None = None,
    with_hits: bool = False,
) -> PullReport:
    """Bring `mirror` up to date with the rig (only `test`'s point sets when given).

    with_hits: fetch new point sets with every hit's raw record (several times the bytes);
    without, as the rig stored them at commit, hits listed without records. A point set
    already mirrored is not fetched again either way.
    """
    started = time.perf_counter()
    info = client.info()
    mirror.bind(info.rig_id, info.name, client.url)
    report = PullReport(cursor=mirror.cursor())
    changes = feed(client, report.cursor)
    if test is not None:
        client.test(test)  # a RigError 404 for a test the rig does not have
        changes = [c for c in changes if c.test == test]
    ids = [c.point_set_id for c in changes if c.kind == "point_set"]
    wanted = [i for i in ids if i is not None and not mirror.has_point_set(i)]
    if progress is not None:
        progress(0, len(wanted))
    tests = {t.name: t for t in client.tests()}
    batch: list[tuple[records.WireChange, MirroredPointSet | records.WireTest | None]] = []
    batch_bytes, batch_start = 0, time.perf_counter()
    with Prefetch(client, wanted, with_hits) as bodies:
        for change in changes:
            item: MirroredPointSet | records.WireTest | None = None
            if change.kind == "test":
                item = tests.get(change.test) or client.test(change.test)
            elif change.point_set_id is not None:
                if change.point_set_id not in bodies:
                    report.already_here += 1  # pulled earlier with --test
                else:
                    item = bodies.take(change.point_set_id)
                    batch_bytes += len(item.body)
            batch.append((change, item))
            if batch_bytes >= BATCH_BYTES or time.perf_counter() - batch_start >= BATCH_S:
                _store(mirror, batch, report, advance=test is None)
                if progress is not None:
                    progress(report.point_sets, len(wanted))
                batch, batch_bytes, batch_start = [], 0, time.perf_counter()
        _store(mirror, batch, report, advance=test is None)
    if progress is not None:
        progress(report.point_sets, len(wanted))
    report.seconds = time.perf_counter() - started
    return report


def _store(
    mirror: Mirror,
    batch: list[tuple[records.WireChange, MirroredPointSet | records.WireTest | None]],
    report: PullReport,
    advance: bool,
) -> None:
    if not batch:
        return
    with mirror.transaction():
        for change, item in batch:
            if isinstance(item, records.WireTest):
                mirror.put_test(item)
                report.tests += 1
            elif isinstance(item, MirroredPointSet):
                if mirror.put_point_set(item):
                    report.point_sets += 1
                    report.bytes += len(item.body)
                    report.new.append(item.summary)
                else:
                    report.already_here += 1
            if advance:
                mirror.set_cursor(change.seq)
                report.cursor = change.seq


def watch(
    client: RigClient,
    mirror: Mirror,
    on_pull: Callable[[PullReport], None],
    stop: Callable[[], bool],
    wait_s: float = WATCH_WAIT_S,
    with_hits: bool = False,
) -> None:
    """Pull, then wait on the change feed and pull each change as it lands, until `stop()`.

    A rig that stops answering is tried again after 0.5, 1, 2, then every 5 s; the mirror
    keeps what it has meanwhile. with_hits: as for `pull`.
    """
    failures = 0
    while not stop():
        try:
            report = pull(client, mirror, with_hits=with_hits)
            on_pull(report)
            failures = 0
            if stop():
                return
            client.changes(report.cursor, wait_s=wait_s)  # returns early on a new change
        except RigUnreachable as exc:
            delay = RECONNECT_S[min(failures, len(RECONNECT_S) - 1)]
            if failures == 0:
                log.warning("%s; trying again", exc)
            else:
                log.debug("%s; next try in %g s", exc, delay)
            failures += 1
            end = time.monotonic() + delay
            while not stop() and time.monotonic() < end:
                time.sleep(0.05)
