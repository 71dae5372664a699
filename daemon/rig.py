"""The rig: one device, one processing thread, the capture pipeline end to end.

    SerialLink (reader thread) ─► Decoder ─► Acquirer ─► check_hit ─► Session ─► Store

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
from collections.abc import Callable, Mapping
from concurrent.futures import Future
from typing import Any, TypeVar

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

from . import placement, resume, stages
from .capture.acquire import Acquirer
from .capture.hits import check_hit
from .capture.link import LinkChange, LinkState, SerialLink
from .capture.session import HitOutcome, Session
from .capture.spectra import single_average_warning
from .config import Config
from .display import last_hit_view
from .errors import DiskLowError, SessionError, TaprigError
from .grid import test_meta
from .records import GridPoint, HitRecord, PointSet, RovingMode
from .rigstate import RigEvent, RigStats, RigView, hit_fields
from .room import Room
from .store import Store

log = logging.getLogger(__name__)
T = TypeVar("T")
Places = Mapping[str, str | tuple[str, str]]  # label -> where, or (where, direction)

DISK_CHECK_S = 1.0  # seconds between looks at the data folder's free space


class Rig:
    """Start with `start()`, stop with `close()`; drive with the methods below."""

    def __init__(self, config: Config, store: Store, url: str | None = None) -> None:
        self.config = config
        self.store = store
        self.url = url or config.device.url
        self.stats = RigStats()
        self.info: DeviceInfo | None = None
        self.link_state = LinkState.CONNECTING
        self.armed = False
        self.session: Session | None = None
        self._decoder = stages.decoder(config)
        self._checks = stages.check_settings(config)
        self._acq: Acquirer | None = None
        self._enc = FrameEncoder()
        self._link = SerialLink(self.url, baudrate=config.device.baudrate,
                                stall_after_s=config.device.stall_s)  # fmt: skip
        self._commands: queue.SimpleQueue[tuple[Callable[[], Any], Future[Any]]] = (
            queue.SimpleQueue()
        )
        self._observers: list[Callable[[RigEvent], None]] = []
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name="rig", daemon=True)
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
        self._stop.set()
        if self._thread.is_alive():
            self._thread.join(timeout=5.0)
        self._link.close()

    def resume_later(self) -> bool:
        """Carry on with the session a previous run left (daemon/resume.py) once the device
        has identified itself: select its test and arm if it was armed. False if there is none."""
        record = resume.read(self.store.path.parent)
        if record is None:
            return False

        def now_or_when_identified() -> None:
            if self._acq is not None:
                self._carry_on(record)
            else:
                self._resume = record

        self.call(now_or_when_identified)
        return True

    def subscribe(self, observer: Callable[[RigEvent], None]) -> None:
        """`observer` is called on the processing thread: it must return quickly."""
        self._observers.append(observer)

    # --- commands (any thread) ----------------------------------------------

    def call(self, fn: Callable[[], T], timeout: float = 10.0) -> T:
        """Run `fn` on the processing thread and return its result (or raise its error)."""
        fut: Future[T] = Future()
        self._commands.put((fn, fut))
        return fut.result(timeout=timeout)

    def create_test(self, name: str, grid: list[GridPoint],
                    roving_mode: RovingMode = RovingMode.HAMMER, reference: str | None = None,
                    averages: int | None = None, sensor_points: Places | None = None,
                    outline: str | None = None) -> list[str]:  # fmt: skip
        """Store a new test; returns the response channels whose place is still unknown
        (`placement.test_meta`: sensor places, never guessed; the grid's warnings, logged;
        the outline's text, when one came with the grid)."""
        try:
            ref, meta = placement.test_meta(roving_mode is RovingMode.HAMMER, grid, reference,
                                            self.config.response_channels, sensor_points or {})
        except ValueError as exc:
            raise SessionError(f"test {name!r}: {exc}") from None
        meta = {**test_meta(None, outline), **meta}
        for text in meta["grid_warnings"]:
            log.warning("test %s: %s", name, text)
        avg = averages if averages is not None else self.config.capture.averages
        self.store.save_test(name, grid, roving_mode, ref, avg, meta)
        return list(meta.get("sensors_missing", []))

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

    def _serve_commands(self) -> None:
        while True:
            try:
                fn, fut = self._commands.get_nowait()
            except queue.Empty:
                return
            try:
                fut.set_result(fn())
            except Exception as exc:
                fut.set_exception(exc)

    def _link_change(self, change: LinkChange) -> None:
        self.link_state = change.state
        self._emit("device", {"state": change.state.value, "detail": change.detail})
        if change.state is LinkState.CONNECTED and change.detail.startswith("opened"):
            self._decoder.reset_link()
            for data in stages.opening_bytes(self._decoder, self._enc):
                self._link.send(data)
        elif change.state is LinkState.STALLED:
            self._link.reconnect("no data: reopening the device")

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
        changed = self.info is None or (info.rate_milli_hz, info.channels) != (
            self.info.rate_milli_hz, self.info.channels,
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
        if self._resume is not None:
            self._carry_on(self._resume)

    def _carry_on(self, record: dict[str, Any]) -> None:
        """Select and arm as the previous run left it; a failure is reported, not raised."""
        self._resume = None
        name = record["test"]
        try:
            self._select(name)
            if record.get("armed"):
                self._arm()
            text = f"carried on with test {name} as the previous run left it"
        except TaprigError as exc:  # the test was deleted, the disk is low, ...
            text = f"could not carry on with test {name}: {exc}"
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
        return outcome

    def _remember(self, outcome: HitOutcome) -> None:
        """Keep a display-sized view of the last hit (and the point's FRF so far)."""
        record, session = self._last_record, self.session
        if record is None or session is None:
            return
        c = outcome.completed
        frf = (c.freq_hz, c.h1, c.coherence) if c is not None else session.running_frf()
        labels = tuple(ch.label for ch in session.channels)
        view = last_hit_view(record.data, record.rate_hz, record.first_index, labels,
                             *(frf if frf is not None else (None, None, None)))  # fmt: skip
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
        self._need_session()
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

    def _cursor(self, move: Callable[[Session], None]) -> None:
        session = self._need_session()
        move(session)
        self._emit("cursor", self._snapshot())

    def _snapshot(self) -> dict[str, Any]:
        s, free = self.session, self._room.free_mb
        st = self._decoder.stats
        return {
            "device": self.url, "state": self.link_state.value, "armed": self.armed,
            "rate_hz": self.info.rate_hz if self.info else None,
            "test": s.plan.name if s else None, "point": s.cursor if s else None,
            "averages": s.averages if s else 0,
            "required": s.plan.averages if s else 0, "waiting": s.waiting if s else False,
            "done": sorted(s.done) if s else [],
            "link": {"crc_errors": st.crc_errors, "samples_lost": st.samples_lost,
                     "resyncs": st.resyncs, "frames_ok": st.frames_ok,
                     "malformed_lines": st.malformed_lines, "reconnects": self._link.reconnects},
            "disk": {"free_mb": None if free is None else round(free, 1),
                     "min_free_mb": self.config.store.min_free_mb,
                     "waiting_for_room": self.waiting_for_room},
        }  # fmt: skip

    def _emit(self, kind: str, data: dict[str, Any]) -> None:
        # Published first: an observer told of a change finds it in `view()`.
        self._publish()
        event = RigEvent(kind, data)
        for observer in self._observers:
            try:
                observer(event)
            except Exception:
                log.exception("an observer failed on %s", kind)
