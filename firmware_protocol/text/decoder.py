"""TextDecoder: byte chunks of the text line input in, events out, in stream order.

Events: sample blocks, gaps for malformed lines, the device description synthesized from
configuration and `# rate=<Hz>` comments (rate.py), and protocol violations. Speed: every
complete line of a chunk is classified with numpy (lines.layout) and the numbers of the good
lines are parsed by one C call (`np.fromstring`) per group of 256 lines. Python loops run
only over comments, over runs of malformed lines and on the error path (a group whose
one-call parse fails).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence

import numpy as np

from .. import frames as fr
from ..events import (
    DeviceInfoReceived,
    Event,
    Gap,
    IndexReset,
    LinkStats,
    MalformedLine,
    ProtocolViolation,
    SampleBlock,
)
from .lines import (
    MAX_LINE_BYTES,
    TO_SPACE,
    Bool,
    Float,
    Int,
    Layout,
    layout,
    line_fault,
    parse_line,
    parse_numbers,
)
from .rate import RATE_COMMENT, RATE_RANGE, no_rate_message, rate_error

__all__ = ["ADC_BITS", "REPORT_EVERY", "REPORT_FIRST", "TextDecoder"]

ADC_BITS = 24
"""Converter resolution stated in the synthesized DeviceInfo (float32 mantissa)."""

REPORT_FIRST = 10
REPORT_EVERY = 1000
"""MalformedLine events: the first REPORT_FIRST, then every REPORT_EVERY-th (all are counted)."""

# Lines parsed by one C call, and on the error path before one line at a time.
_GROUP_LINES = 256
_SMALL_GROUP_LINES = 16

_FaultFn = Callable[[int], str]
"""Gives the reason chunk line j is malformed."""


class TextDecoder:
    """Turns a stream of text lines into events. One instance per connection.

    channels: values per line; None takes it from the first well-formed line
        (or from the length of a per-channel `full_scale_v`).
    full_scale_v: volts at full scale, one for all channels or one per channel.
    rate_hz: sample rate in Hz from the configuration; a `# rate=<Hz>` comment
        in the stream overrides it (the last one counts).
    device_id: the name given in the synthesized DeviceInfo (ASCII, <= 16 characters).
    rate_key: how messages name the setting that gives the rate (the daemon's
        "device.text_rate_hz", a command's option).

    Sample indexes count every line that is neither a comment nor blank,
    good or malformed, from 0 at the start of the link. Line numbers (in
    MalformedLine) count every line from 1.
    """

    name = "text"

    def __init__(
        self,
        *,
        channels: int | None = None,
        full_scale_v: float | Sequence[float] = 10.0,
        rate_hz: float | None = None,
        device_id: str = "text-input",
        rate_key: str = "the sample rate in the configuration",
    ) -> None:
        self._rate_key = rate_key
        if isinstance(full_scale_v, int | float):
            scales: tuple[float, ...] | None = None
            self._full_scale_all = float(full_scale_v)
            checked = [self._full_scale_all]
        else:
            scales = tuple(float(v) for v in full_scale_v)
            self._full_scale_all = 0.0
            checked = list(scales)
            if channels is None:
                channels = len(scales)
            elif len(scales) != channels:
                raise ValueError(
                    f"full_scale_v has {len(scales)} values; channels = {channels} needs "
                    f"one per channel"
                )
        for v in checked:
            if not (math.isfinite(v) and v > 0.0):
                raise ValueError(f"full_scale_v = {v}; allowed a finite value > 0 volts")
        if channels is not None and not 1 <= channels <= fr.MAX_CHANNELS:
            raise ValueError(f"channels = {channels}; allowed 1..{fr.MAX_CHANNELS}")
        if rate_hz is not None:
            problem = rate_error(float(rate_hz))
            if problem is not None:
                raise ValueError(f"rate_hz: {problem}")
        if not device_id.isascii() or len(device_id) > 16:
            raise ValueError(f"device_id {device_id!r}; allowed up to 16 ASCII characters")
        self._scales = scales
        self._channels = channels
        self._rate = None if rate_hz is None else float(rate_hz)
        self._device_id = device_id
        self._info: fr.DeviceInfo | None = None
        self._announced: fr.DeviceInfo | None = None
        self._warned_no_rate = False
        self._seen_good = False
        self._partial = b""
        self._discard_first: int | None = None  # first byte of an overlong line being dropped
        self._line_base = 0  # lines completed before the current chunk
        self._next_index = 0  # sample index of the next sample line
        self._reset_from: int | None = None  # end index before reset_link, until samples come
        self.stats = LinkStats()
        self._update_info()

    # --- public surface -----------------------------------------------------

    @property
    def info(self) -> fr.DeviceInfo | None:
        """The synthesized device description, once channels and rate are both known."""
        return self._info

    @property
    def channels(self) -> int | None:
        """Values per line, configured or detected; None until known."""
        return self._channels

    @property
    def rate_hz(self) -> float | None:
        """Sample rate in Hz, configured or announced; None until known."""
        return self._rate

    def reset_link(self) -> None:
        """Forget the line in progress after a reconnect; keep info, rate and channels.

        The next line is line 1 and the next sample line has index 0 again; an
        IndexReset is reported before it if samples had been counted.
        """
        self._partial = b""
        self._discard_first = None
        self._line_base = 0
        if self._next_index > 0:
            self._reset_from = self._next_index
        self._next_index = 0

    def feed(self, chunk: bytes | bytearray | memoryview) -> list[Event]:
        """Decode every complete line; keep the last partial line for the next call."""
        raw = bytes(chunk)
        self.stats.bytes_in += len(raw)
        events: list[Event] = []
        if self._info is not None and self._announced is None:
            self._announce(events)
        overlong_first = False
        if self._discard_first is not None:
            # An overlong line is being dropped: skip to its end, then stand a
            # one-byte line in for it so it is counted in stream order.
            end = raw.find(b"\n")
            if end < 0:
                return events
            first = self._discard_first
            self._discard_first = None
            stand_in = b"#\n" if first == 0x23 else b"\x00\n"
            overlong_first = first != 0x23
            data = stand_in + raw[end + 1 :]
        else:
            data = self._partial + raw
        last = data.rfind(b"\n")
        tail = data[last + 1 :]
        if len(tail) > MAX_LINE_BYTES + 1:  # +1: the "\r" of a "\r\n" may follow
            self._discard_first = tail[0]
            tail = b""
        self._partial = tail
        if last >= 0:
            self._lines(data, last + 1, overlong_first, events)
        return events

    # --- state --------------------------------------------------------------

    def _update_info(self) -> None:
        if self._channels is None or self._rate is None:
            return
        scales = self._scales or (self._full_scale_all,) * self._channels
        self._info = fr.DeviceInfo(
            protocol_version=fr.PROTOCOL_VERSION,
            sample_format=fr.SampleFormat.FLOAT32,
            rate_milli_hz=round(self._rate * 1000.0),
            device_id=self._device_id,
            firmware="",
            channels=tuple(fr.ChannelInfo(fs, ADC_BITS) for fs in scales),
        )

    def _announce(self, events: list[Event]) -> None:
        if self._info is not None and self._info != self._announced:
            self._announced = self._info
            events.append(DeviceInfoReceived(self._info))

    def _violation(self, events: list[Event], message: str) -> None:
        self.stats.protocol_errors += 1
        events.append(ProtocolViolation(message))

    def _comment(self, line: bytes) -> list[Event]:
        """Events of one comment line (content without its line end)."""
        self.stats.extra["comment_lines"] = self.stats.extra.get("comment_lines", 0) + 1
        match = RATE_COMMENT.fullmatch(line) if len(line) <= MAX_LINE_BYTES else None
        if match is None:
            return []
        events: list[Event] = []
        text = match.group(1).decode("ascii", errors="replace")
        keeping = "keeping no rate" if self._rate is None else f"keeping {self._rate:g} Hz"
        try:
            rate = float(text)
        except ValueError:
            self._violation(
                events,
                f"rate comment value {text!r} is not a number; allowed {RATE_RANGE}; {keeping}",
            )
            return events
        problem = rate_error(rate)
        if problem is not None:
            self._violation(events, f"rate comment {text!r}: {problem}; {keeping}")
            return events
        self._rate = rate
        self._update_info()
        self._announce(events)
        return events

    def _first_good(self, channels: int) -> list[Event]:
        """Events due at the first well-formed line of the decoder's life."""
        events: list[Event] = []
        self._seen_good = True
        if self._channels is None:
            self._channels = channels
            self._update_info()
        if self._rate is None:
            if not self._warned_no_rate:
                self._warned_no_rate = True
                self._violation(events, no_rate_message(self._rate_key))
        else:
            self._announce(events)
        return events

    # --- lines --------------------------------------------------------------

    def _lines(self, data: bytes, size: int, overlong_first: bool, events: list[Event]) -> None:
        """Decode data[:size], complete lines each ending in "\\n" (the rest is ignored)."""
        lay = layout(data, size, overlong_first)
        channels, detect_at = self._channel_count(data, lay)
        if channels is None:
            good = np.zeros(lay.n, dtype=np.bool_)
        else:
            good = lay.legal & (lay.tokens == channels)
        if detect_at > 0:
            good[:detect_at] = False

        good_lines = np.flatnonzero(good)
        values = np.empty((0, channels or 1), dtype=np.float64)
        if good_lines.size:
            assert channels is not None
            values, ok = self._parse(data, lay.starts, lay.cends, good, lay.tokens, channels)
            if not ok.all():
                good[good_lines[~ok]] = False
                values = values[ok]

        sample_lines = np.flatnonzero(lay.sample)
        barriers = self._barriers(data, lay, good, channels, sample_lines)
        self.stats.extra["blank_lines"] = self.stats.extra.get("blank_lines", 0) + int(
            np.count_nonzero(lay.blank)
        )

        def fault(j: int) -> str:
            if lay.overlong[j]:
                return f"longer than {MAX_LINE_BYTES} bytes"
            known = channels if (detect_at < 0 or j > detect_at) else None
            return line_fault(data[lay.starts[j] : lay.cends[j]], known) or "unreadable line"

        self._emit(events, sample_lines, good[sample_lines], values, barriers, fault)
        self._line_base += lay.n

    def _channel_count(self, data: bytes, lay: Layout) -> tuple[int | None, int]:
        """(channel count, line it was found on): configured (line -1), or the first line
        that parses; (None, -1) while no line has."""
        if self._channels is not None:
            return self._channels, -1
        fit = lay.legal & (lay.tokens >= 1) & (lay.tokens <= fr.MAX_CHANNELS)
        for j in np.flatnonzero(fit).tolist():
            if parse_line(data[lay.starts[j] : lay.cends[j]]) is not None:
                return int(lay.tokens[j]), j
        return None, -1

    def _barriers(
        self, data: bytes, lay: Layout, good: Bool, channels: int | None, sample_lines: Int
    ) -> list[tuple[int, list[Event]]]:
        """Events at their line: comments and the first good line of the stream may emit
        some; they are placed between the sample runs."""
        barriers: list[tuple[int, list[Event]]] = []
        comment_lines = np.flatnonzero(lay.comment).tolist()
        first_good = int(np.argmax(good)) if not self._seen_good and good.any() else -1
        if self._reset_from is not None and sample_lines.size:
            self.stats.index_resets += 1
            reset: list[Event] = [IndexReset(self._reset_from, 0)]
            self._reset_from = None
            barriers.append((int(sample_lines[0]), reset))
        for j in sorted([*comment_lines, first_good] if first_good >= 0 else comment_lines):
            if j == first_good:
                assert channels is not None
                found = self._first_good(channels)
            else:
                found = self._comment(data[lay.starts[j] : lay.cends[j]])
            if found:
                barriers.append((j, found))
        barriers.sort(key=lambda b: b[0])  # stable: the IndexReset stays first on its line
        return barriers

    def _parse(
        self,
        data: bytes,
        starts: Int,
        cends: Int,
        good: Bool,
        tokens: Int,
        channels: int,
    ) -> tuple[Float, Bool]:
        """Values (n_good, channels) of the good lines and which of them really parsed.

        Lines are parsed in groups of _GROUP_LINES, each group in one C call on the
        bytes between its first and last line (token-free lines add nothing). A
        group fails only if a token passed the character check without being a
        number ("1.2.3", "1e"); it is parsed again in groups of _SMALL_GROUP_LINES,
        and one line at a time only inside a small group that fails. So a rare bad
        line costs a re-parse of a few hundred lines, not of the chunk.
        """
        n_lines = good.size
        good_before = np.zeros(n_lines + 1, dtype=np.int64)
        np.cumsum(good, out=good_before[1:])
        n_good = int(good_before[-1])
        values = np.empty((n_good, channels), dtype=np.float64)
        ok = np.ones(n_good, dtype=np.bool_)
        spaced = data.translate(TO_SPACE)  # one byte for one byte: offsets still hold
        joinable = good | (tokens == 0)

        def text_of(lo: int, hi: int) -> bytes:
            if joinable[lo:hi].all():
                return spaced[int(starts[lo]) : int(cends[hi - 1])]
            lines = (np.flatnonzero(good[lo:hi]) + lo).tolist()
            return b" ".join(spaced[int(starts[j]) : int(cends[j])] for j in lines)

        def parse(lo: int, hi: int, step: int) -> None:
            for g_lo in range(lo, hi, step):
                g_hi = min(g_lo + step, hi)
                k0, k1 = int(good_before[g_lo]), int(good_before[g_hi])
                if k0 == k1:
                    continue
                part = parse_numbers(text_of(g_lo, g_hi), (k1 - k0) * channels)
                if part is not None:
                    values[k0:k1] = part.reshape(-1, channels)
                elif step > _SMALL_GROUP_LINES:
                    parse(g_lo, g_hi, _SMALL_GROUP_LINES)
                else:
                    for j in (np.flatnonzero(good[g_lo:g_hi]) + g_lo).tolist():
                        row = parse_line(data[int(starts[j]) : int(cends[j])])
                        k = int(good_before[j])
                        if row is None:
                            ok[k] = False
                        else:
                            values[k] = row

        parse(0, n_lines, _GROUP_LINES)
        ok &= np.isfinite(values).all(axis=1)
        return values, ok

    def _emit(
        self,
        events: list[Event],
        sample_lines: Int,
        good: Bool,
        values: Float,
        barriers: list[tuple[int, list[Event]]],
        fault: _FaultFn,
    ) -> None:
        """Sample blocks and gaps of the sample lines, with the barrier events in line order.

        sample_lines: chunk line numbers of the sample lines; good: which of them
        are well-formed; values: (good count, channels) volts of the good ones.
        """
        n = sample_lines.size
        cuts = [int(c) for c in np.searchsorted(sample_lines, [b[0] for b in barriers])]
        change = (np.flatnonzero(good[1:] != good[:-1]) + 1).tolist() if n else []
        bounds = sorted({0, n, *cuts, *change})
        good_before = np.zeros(n + 1, dtype=np.int64)
        np.cumsum(good, out=good_before[1:])
        base = self._next_index
        b_next = 0
        for lo, hi in zip(bounds[:-1], [*bounds[1:]], strict=True):
            while b_next < len(barriers) and cuts[b_next] <= lo:
                events.extend(barriers[b_next][1])
                b_next += 1
            if lo == hi:
                continue
            first = base + lo
            if good[lo]:
                g0, g1 = int(good_before[lo]), int(good_before[hi])
                self.stats.samples += g1 - g0
                events.append(SampleBlock(first, np.ascontiguousarray(values[g0:g1].T)))
            else:
                self._malformed(events, sample_lines, lo, hi, fault)
                self.stats.samples_lost += hi - lo
                events.append(Gap(first, hi - lo))
        for _, found in barriers[b_next:]:
            events.extend(found)
        self._next_index = base + n

    def _malformed(
        self, events: list[Event], sample_lines: Int, lo: int, hi: int, fault: _FaultFn
    ) -> None:
        """Count sample lines lo..hi-1 as malformed; report the rate-limited few."""
        before = self.stats.malformed_lines
        after = before + hi - lo
        self.stats.malformed_lines = after
        # Ordinals (from 1) of the malformed lines to report.
        ordinals = list(range(before + 1, min(after, REPORT_FIRST) + 1))
        ordinals += range((before // REPORT_EVERY + 1) * REPORT_EVERY, after + 1, REPORT_EVERY)
        for o in ordinals:
            j = int(sample_lines[lo + o - before - 1])
            events.append(MalformedLine(self._line_base + j + 1, fault(j)))
