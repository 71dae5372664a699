"""The rig: one device, one processing thread, the capture pipeline end to end.

    link (its own process) ─► Decoder ─► Acquirer ─► check_hit ─► Session ─► Store

The processing thread owns the decoder, the acquirer, the session and every field of
the rig; other threads (the CLI, the HTTP service, the event loop) never read those
fields. They act through `call`, which queues a command and waits for its result, and
read `view()`: a frozen `RigView` the processing thread publishes whole, under a lock,
after every command and every item it processes. Observers get every outcome as a plain
event, on the processing thread.
"""

from __future__ import annotations

import logging
import queue
import threading
import time
from collections.abc import Callable
from typing import Any

from taprig.firmware_protocol import (
    DeviceInfo,
    DeviceInfoReceived,
    FrameEncoder,
    Gap,
    IndexReset,
    ProtocolViolation,
    SampleBlock,
    StatusReceived,
)

from . import resume, stages, tally
from .capture.acquire import Acquirer
from .capture.hits import check_hit
from .capture.link import LinkChange, LinkState
from .capture.session import HitOutcome, Session, no_session
from .capture.spectra import single_average_warning
from .config import Config
from .display import last_hit_view
from .errors import DiskLowError, SessionError, TaprigError
from .owner import Owner
from .records import GridPoint, HitRecord, PointSet, RovingMode
from .rigstate import RigEvent, RigStats, RigView, hit_fields
from .room import Room
from .store import Store

log = logging.getLogger(__name__)

DISK_CHECK_S = 1.0  # seconds between looks at the data folder's free space


class Rig(Owner[RigEvent]):
    """Start with `start()`, stop with `close()`; drive with the methods below."""

    def __init__(self, config: Config, store: Store, url: str | None = None) -> None:
        super().__init__("rig")
        self.config = config
        self.store = store
        self.url = url or config.device.url
        self.stats = RigStats()
        self.info: DeviceInfo | None = None
        self.link_state = LinkState.CONNECTING
        self.link_detail = "opening the device"
        self.armed = False
        self.session: Session | None = None
        self._decoder = stages.decoder(config)
        self._checks = stages.check_settings(config)
        self._acq: Acquirer | None = None
        self._enc = FrameEncoder()
        self._link = stages.link(config, self.url)
        self._closed = False
        self._item_time = 0.0
        self._last_record: HitRecord | None = None
        self.last_hit: dict[str, Any] | None = None
        """A display-sized view of the last hit (other threads: `view().last_hit`)."""
        self.beat = time.monotonic()
        """When the processing thread last went round its loop (monotonic s); for a watchdog."""
        self.waiting_for_room = False
        """Armed, or asked to arm, while the disk was too full: arms by itself when room returns."""
        self._next_disk_check = 0.0
        self._room = Room(store.path.parent, config.store.min_free_mb)
        self._resume: dict[str, Any] | None = None
        self._tally: dict[str, Any] | None = None  # the selected test's, once it is complete
        self._latencies: tuple[float, ...] = ()
        self._view_lock = threading.Lock()
        self._view = self._make_view()

    # --- lifecycle ------------------------------------------------------------

    def start(self) -> Rig:
        self._link.start()
        self._thread.start()
        return self

    def close(self) -> None:
        """Stop processing and close the link. Safe to call twice; the store is the caller's."""
        if self._closed:
            return
        self._closed = True
        self._end_thread()
        self._link.close()

    def resume_later(self) -> bool:
        """Carry on with the session a previous run left (daemon/resume.py) once the device
        has identified itself: select its test and arm if it was armed. False if there is none."""
        record = resume.read(self.store.path.parent)
        if record is None:
            return False
        self.open_when_ready(record["test"], bool(record.get("armed")), resumed=True)
        return True

    def open_when_ready(self, test: str, arm: bool, *, resumed: bool = False) -> None:
        """Select `test` (and arm) now if the device has identified itself, else as soon as it
        does; the service runs meanwhile and the state says what the rig waits for."""
        record = {"test": test, "armed": arm, "resumed": resumed}

        def now_or_when_identified() -> None:
            if self._acq is not None:
                self._carry_on(record)
            else:
                self._resume = record

        self.call(now_or_when_identified)

    # --- commands (any thread; `call` and `subscribe` come from daemon/owner.py) ----

    def create_test(
        self,
        name: str,
        grid: list[GridPoint],
        roving_mode: RovingMode = RovingMode.HAMMER,
        reference: str | None = None,
        averages: int | None = None,
        sensor_points: stages.Places | None = None,
        outline: str | None = None,
    ) -> list[str]:
        """Store a new test (daemon/stages.py's `save_test`; any thread); returns the response
        channels whose place is still unknown."""
        return stages.save_test(self.config, self.store, name, grid, roving_mode, reference,
                                averages, sensor_points, outline)  # fmt: skip

    def select_test(self, name: str) -> None:
        self.call(lambda: self._select(name))

    def arm(self) -> None:
        self.call(self._arm)

    def disarm(self) -> None:
        self.call(self._disarm)

    def accept(self) -> HitOutcome:
        return self.call(lambda: self._after(self._need_session().accept()))

    def reject(self) -> HitOutcome:
        return self.call(lambda: self._after(self._need_session().reject()))

    def redo(self) -> None:
        self.call(lambda: self._cursor(lambda s: s.redo()))

    def undo(self) -> None:
        """Take back the last counted tap of the current point (SessionError if none)."""
        self.call(lambda: self._cursor(lambda s: s.undo()))

    def measure_again(self, label: str) -> None:
        """Open a measured point for a new version: the only way a done point takes taps."""
        self.call(lambda: self._cursor(lambda s: s.measure_again(label)))

    def goto(self, label: str) -> None:
        self.call(lambda: self._cursor(lambda s: s.goto(label)))

    def step(self, delta: int) -> None:
        self.call(lambda: self._cursor(lambda s: s.step(delta)))

    def snapshot(self) -> dict[str, Any]:
        return self.call(self._snapshot)

    def view(self) -> RigView:
        """The rig's state as last published by the processing thread (any thread; no wait)."""
        with self._view_lock:
            return self._view

    # --- processing thread ----------------------------------------------------

    def _run(self) -> None:
        while not self._stop.is_set():
            self.beat = time.monotonic()
            if self.beat >= self._next_disk_check:
                self._next_disk_check = self.beat + DISK_CHECK_S
                self._watch_disk()
            self._serve_commands()
            self._publish()
            try:
                item = self._link.items.get(timeout=0.02)
            except queue.Empty:
                continue
            self._item_time = time.perf_counter()
            try:
                if isinstance(item, LinkChange):
                    self._link_change(item)
                else:
                    self._bytes(item)
            except Exception:
                # A bug in one stage must not stop the rig: log it and carry on with the stream.
                log.exception("processing failed; continuing with the next data")
            self._publish()

    def _make_view(self) -> RigView:
        s, st = self.session, self.stats
        return RigView(
            self.link_state, self.info, self.armed, self.waiting_for_room,
            s.plan if s else None, s.cursor if s else None, self._decoder.stats.samples,
            st.hits_seen, st.hits_while_disarmed, st.commits, self._latencies, self.last_hit,
        )  # fmt: skip

    def _publish(self) -> None:
        view = self._make_view()
        with self._view_lock:
            self._view = view

    def _link_change(self, change: LinkChange) -> None:
        self.link_state, self.link_detail = change.state, change.detail
        self._emit("device", {"state": change.state.value, "detail": change.detail})
        if change.state is LinkState.CONNECTED and change.detail.startswith("opened"):
            self._decoder.reset_link()
            for data in stages.opening_bytes(self._decoder, self._enc):
                self._link.send(data)
        elif change.state is LinkState.STALLED:
            # The reader decides: this report may be stale, the bytes flowing again by now.
            self._link.reconnect("no data: reopening the device", only_if_stalled=True)

    def _bytes(self, data: bytes) -> None:
        for ev in self._decoder.feed(data):
            if isinstance(ev, SampleBlock):
                if self._acq is not None:
                    for rec in self._acq.feed(ev.first_index, ev.volts):
                        self._hit(rec)
            elif isinstance(ev, DeviceInfoReceived):
                self._new_info(ev.info)
            elif isinstance(ev, Gap) and self._acq is not None:
                self._acq.gap(ev.first_index, ev.count)
            elif isinstance(ev, IndexReset) and self._acq is not None:
                self._acq.restart(ev.first_index)
            elif isinstance(ev, StatusReceived) and self._acq is not None:
                self._acq.status(ev.status.sample_index, ev.status.overload_mask)
            elif isinstance(ev, ProtocolViolation):
                self._emit("message", {"text": ev.message})

    def _new_info(self, info: DeviceInfo) -> None:
        changed = self.info is None or (info.rate_milli_hz, info.channels, info.sample_format) != (
            self.info.rate_milli_hz, self.info.channels, self.info.sample_format,
        )  # fmt: skip
        self.info = info
        if not changed and self._acq is not None:
            return
        try:
            self._acq = stages.acquirer(self.config, info)
        except TaprigError as exc:
            self._emit("message", {"text": str(exc)})
            self._acq = None
            return
        log.info(
            "device %s: %d channels at %g Hz", info.device_id, info.channel_count, info.rate_hz
        )
        self._emit("device", {"state": self.link_state.value, "identified": True,
                              "detail": f"{info.device_id} identified itself"})  # fmt: skip
        if self._resume is not None:
            self._carry_on(self._resume)

    def _carry_on(self, record: dict[str, Any]) -> None:
        """Select and arm as the previous run left it; a failure is reported, not raised."""
        self._resume = None
        name, resumed = record["test"], record.get("resumed", True)
        try:
            self._select(name)
            if record.get("armed") and not self._need_session().complete:
                self._arm()
            text = (f"carried on with test {name} as the previous run left it" if resumed
                    else f"device ready: test {name} opened")  # fmt: skip
        except TaprigError as exc:  # the test was deleted, the disk is low, ...
            text = f"could not {'carry on with' if resumed else 'open'} test {name}: {exc}"
        log.info("%s", text)
        self._emit("message", {"text": text})

    def _hit(self, record: HitRecord) -> None:
        self.stats.hits_seen += 1
        session = self.session
        if not self.armed or session is None:
            self.stats.hits_while_disarmed += 1
            return
        verdict = check_hit(record, self._checks)
        self._last_record = record
        self._after(session.on_hit(record, verdict))

    def _after(self, outcome: HitOutcome) -> HitOutcome:
        self._remember(outcome)  # before the event: a display told of a hit can fetch it
        self._emit("hit", hit_fields(outcome, as_pairs=True))
        if outcome.completed is not None:
            self._commit(outcome.completed)
            if self.session is not None and self.session.complete:
                self._finish(self.session)
        return outcome

    def _finish(self, session: Session) -> None:
        """The last point is in: disarm (a stray tap must not make a new version) and say so."""
        self.armed = self.waiting_for_room = False
        self._keep_session()
        self._tally = tally.test_tally(self.store, session.plan.name, len(session.labels))
        log.info("test %s complete: %s", session.plan.name, self._tally)
        self._emit("test_complete", self._tally)
        self._emit("cursor", self._snapshot())

    def _remember(self, outcome: HitOutcome) -> None:
        """Keep a display-sized view of the last hit (and the point's FRF so far)."""
        record, session = self._last_record, self.session
        if record is None or session is None:
            return
        c = outcome.completed
        frf = (c.freq_hz, c.h1, c.coherence, c.gff) if c is not None else session.running_frf()
        freq, h1, coherence, gff = frf if frf is not None else (None, None, None, None)
        labels = tuple(ch.label for ch in session.channels)
        view = last_hit_view(record.data, record.rate_hz, record.first_index, labels,
                             freq, h1, coherence, gff, force=session.force)  # fmt: skip
        view.update(hit_fields(outcome, as_pairs=False))
        self.last_hit = view

    def _commit(self, ps: PointSet) -> None:
        try:
            stored = self.store.commit_point_set(ps)
        except TaprigError as exc:
            # Keep capturing; the operator is told the point must be measured again.
            self._emit("message", {"text": f"point {ps.point} not stored: {exc}"})
            if self.session is not None:
                self.session.done.discard(ps.point)
            return
        self.stats.commits += 1
        self.stats.commit_latency_s.append(time.perf_counter() - self._item_time)
        self._latencies = tuple(self.stats.commit_latency_s)  # copied per commit, not per item
        self._emit("completed", {"point": stored.point, "version": stored.version,
                                 "seq": stored.seq, "averages": stored.n_averages})  # fmt: skip

    # --- command bodies (processing thread) ----------------------------------

    def _select(self, name: str) -> None:
        plan = self.store.get_test(name)
        if self.info is None:
            raise SessionError("the device has not identified itself yet; check the link")
        done = [s.point for s in self.store.list_point_sets(test=name, latest_only=True)]
        self.session = stages.session(self.config, plan, self.info, done)
        complete = self.session.complete
        self._tally = tally.test_tally(self.store, name, len(plan.grid)) if complete else None
        warning = single_average_warning(plan.averages)
        if warning:
            log.warning("test %s: %s", name, warning)
            self._emit("message", {"text": warning})
        self._emit("cursor", {"test": name, "point": self.session.cursor})
        self._keep_session()

    def _keep_session(self) -> None:
        """Keep the selected test and whether capture is wanted (armed, or paused for disk
        room) for a restarted daemon (daemon/resume.py)."""
        s = self.session
        resume.keep(self.store.path.parent, s.plan.name if s else None,
                    self.armed or self.waiting_for_room)  # fmt: skip

    def _arm(self) -> None:
        session = self._need_session()
        if session.point_is_closed and session.complete:
            raise SessionError(f"test {session.plan.name} is complete: pull it from a "
                               "workstation, start a new test, or choose a point and "
                               "measure it again")  # fmt: skip
        if self._room.low():
            # Refused, but the wish is kept: an unattended rig carries on once room returns.
            self.waiting_for_room = True
            self._keep_session()
            raise DiskLowError(
                f"{self._room.shortage()} to arm; it arms by itself when there is room"
            )
        self.armed = True
        self._keep_session()
        self._emit("cursor", self._snapshot())

    def _disarm(self) -> None:
        self.armed = self.waiting_for_room = False
        self._keep_session()
        self._emit("cursor", self._snapshot())

    def _watch_disk(self) -> None:
        """Pause capture while the disk is too full and resume it when room returns.

        The service keeps serving what is stored meanwhile; only new hits are ignored.
        """
        low = self._room.look()
        if low and self.armed:
            self.armed, self.waiting_for_room = False, True
            text = f"{self._room.shortage()}: capture paused until there is room"
        elif low is False and self.waiting_for_room and self.session is not None:
            self.armed, self.waiting_for_room = True, False
            text = f"{self._room.plenty()}: capture resumed"
        else:
            return
        (log.warning if low else log.info)(text)
        self._emit("message", {"text": text})
        self._emit("cursor", self._snapshot())

    def _need_session(self) -> Session:
        if self.session is None:
            raise SessionError("no test is selected")
        return self.session

    def _cursor(self, move: Callable[[Session], object]) -> None:
        session = self._need_session()
        move(session)
        if not session.complete:
            self._tally = None
        self._emit("cursor", self._snapshot())

    def _snapshot(self) -> dict[str, Any]:
        s, free = self.session, self._room.free_mb
        st = self._decoder.stats
        return {
            "device": self.url, "state": self.link_state.value, "detail": self.link_detail,
            "identified": self.info is not None, "armed": self.armed,
            "rate_hz": self.info.rate_hz if self.info else None,
            **(s.snapshot() if s else no_session()), "tally": self._tally,
            "link": {"crc_errors": st.crc_errors, "samples_lost": st.samples_lost,
                     "resyncs": st.resyncs, "frames_ok": st.frames_ok,
                     "malformed_lines": st.malformed_lines, "reconnects": self._link.reconnects,
                     "dropped_reads": self._link.dropped_chunks},
            "disk": {"free_mb": None if free is None else round(free, 1),
                     "min_free_mb": self.config.store.min_free_mb,
                     "waiting_for_room": self.waiting_for_room},
        }  # fmt: skip

    def _emit(self, kind: str, data: dict[str, Any]) -> None:
        # Published first: an observer told of a change finds it in `view()`.
        self._publish()
        self._tell(RigEvent(kind, data))
