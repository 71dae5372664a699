"""Incremental decoder of the plain-text line input (PROTOCOL.md section 4), and its encoder.

A board that prints one sample frame per line (values in volts, separated by
commas, spaces or tabs) is read here. Fed byte chunks split anywhere, the
decoder returns events in stream order: sample blocks, gaps for malformed
lines, the device description synthesized from configuration and
`# rate=<Hz>` comments, and protocol violations.

Speed: every complete line of a chunk is classified with numpy (line ends,
a byte-class lookup table, token counts per line) and the numbers of the good
lines are parsed by one C call (`np.fromstring`) per group of 256 lines.
Python loops run only over comments, over runs of malformed lines and on the
error path (a group whose one-call parse fails).
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from . import frames as fr
from .events import (
    DeviceInfoReceived,
    Event,
    Gap,
    IndexReset,
    LinkStats,
    MalformedLine,
    ProtocolViolation,
    SampleBlock,
)

MAX_LINE_BYTES = 4096
"""Longest line content accepted, in bytes, not counting the line end."""

MIN_RATE_HZ = fr.MIN_RATE_MILLI_HZ / 1000.0
MAX_RATE_HZ = fr.MAX_RATE_MILLI_HZ / 1000.0
ADC_BITS = 24
"""Converter resolution stated in the synthesized DeviceInfo (float32 mantissa)."""

REPORT_FIRST = 10
REPORT_EVERY = 1000
"""MalformedLine events: the first REPORT_FIRST, then every REPORT_EVERY-th (all are counted)."""

# Byte classes: 0 part of a number, 1 separator (the line end counts as one), 2 illegal.
_NUM, _SEP, _BAD = 0, 1, 2
_CLASS = np.full(256, _BAD, dtype=np.uint8)
_CLASS[np.frombuffer(b"0123456789+-.eE", dtype=np.uint8)] = _NUM
_CLASS[np.frombuffer(b" ,\t\n", dtype=np.uint8)] = _SEP

# Separators (and the line ends) to the one separator np.fromstring is given.
_TO_SPACE = bytes.maketrans(b",\t\r\n", b"    ")

# `# rate=<Hz>`, spaces tolerated around the parts, an optional "Hz" unit.
_RATE = re.compile(rb"#\s*rate\s*=\s*(.*?)\s*(?:hz)?\s*", re.IGNORECASE)

_RANGE = "1 Hz to 1 MHz"  # MIN_RATE_HZ to MAX_RATE_HZ, for messages

# What the host writes to ask a text device to announce its rate again: a board that prints
# "# rate=" once at power-up loses that line when the host opens the port later (opening a
# serial port discards input waiting in the driver; pyserial does so on open).
RATE_QUERY = b"?rate\n"


def no_rate_message(rate_key: str) -> str:
    """What the host says while a text stream has no rate; `rate_key` names the setting."""
    return (
        'text input has no sample rate yet: sample lines are dropped until a "# rate=<Hz>" '
        "line arrives (the host asked for it with a ?rate line; a board that announced it "
        f"once, before the port was opened, lost it and may not answer): set {rate_key}"
    )

# Lines parsed by one C call, and on the error path before one line at a time.
_GROUP_LINES = 256
_SMALL_GROUP_LINES = 16

_Int = npt.NDArray[np.int64]
_Bool = npt.NDArray[np.bool_]
_Float = npt.NDArray[np.float64]
_FaultFn = Callable[[int], str]
"""Gives the reason chunk line j is malformed."""


def _rate_error(rate: float) -> str | None:
    """Why `rate` (Hz) is refused, or None if it is inside the protocol's range."""
    if not (math.isfinite(rate) and MIN_RATE_HZ <= rate <= MAX_RATE_HZ):
        return f"rate {rate:g} Hz is outside the allowed range {_RANGE}"
    if not fr.MIN_RATE_MILLI_HZ <= round(rate * 1000.0) <= fr.MAX_RATE_MILLI_HZ:
        return f"rate {rate!r} Hz rounds outside the allowed range {_RANGE}"
    return None


def _line_fault(line: bytes, channels: int | None) -> str | None:
    """Why one line (content without its line end) is not a well-formed sample line.

    channels: the expected count of values, or None while it is still unknown
    (then 1..MAX_CHANNELS values are accepted). None means the line is good.
    This is the slow reference check, used for the reasons of reported lines,
    for channel detection and on the error path.
    """
    if len(line) > MAX_LINE_BYTES:
        return f"longer than {MAX_LINE_BYTES} bytes"
    classes = _CLASS[np.frombuffer(line, dtype=np.uint8)]
    illegal = np.flatnonzero(classes == _BAD)
    if illegal.size:
        col = int(illegal[0])
        byte = line[col]
        if byte >= 0x80:
            return f"byte 0x{byte:02x} at column {col + 1} is not ASCII"
        return f"character {chr(byte)!r} at column {col + 1} is not part of a number"
    tokens = line.translate(_TO_SPACE).split()
    if channels is None:
        if not 1 <= len(tokens) <= fr.MAX_CHANNELS:
            return f"{_values(len(tokens))}; expected 1 to {fr.MAX_CHANNELS}"
    elif len(tokens) != channels:
        return f"{_values(len(tokens))}; expected {channels}"
    for tok in tokens:
        try:
            value = float(tok)
        except ValueError:
            return f"{tok.decode('ascii')!r} is not a number"
        if not math.isfinite(value):
            return f"{tok.decode('ascii')!r} is not a finite number"
    return None


def _values(count: int) -> str:
    return f"{count} value" if count == 1 else f"{count} values"


def _parse_line(line: bytes) -> list[float] | None:
    """The values of a line already known to hold only legal characters, or None."""
    try:
        values = [float(tok) for tok in line.translate(_TO_SPACE).split()]
    except ValueError:
        return None
    return values if all(math.isfinite(v) for v in values) else None


def _fromstring(text: bytes, expected: int) -> _Float | None:
    """Parse whitespace-separated numbers in one C call; None unless exactly `expected`."""
    if expected == 0:
        return np.empty(0, dtype=np.float64)
    try:
        # numpy raises ValueError on data it cannot read to the end.
        values = np.fromstring(text, dtype=np.float64, sep=" ")
    except ValueError:
        return None
    return values if values.size == expected else None


@dataclass(frozen=True, slots=True)
class _Layout:
    """Where the lines of a chunk are and what each is: one entry per complete line."""

    n: int
    starts: _Int  # first byte of each line
    cends: _Int  # one past its content (before "\\r\\n" or "\\n")
    tokens: _Int  # number of tokens
    comment: _Bool
    overlong: _Bool
    blank: _Bool
    sample: _Bool  # neither comment nor blank: meant as samples
    legal: _Bool  # a sample line of allowed bytes and length


def _layout(data: bytes, size: int, overlong_first: bool) -> _Layout:
    """The lines of data[:size] found in a few vectorised passes (no loop per byte)."""
    a = np.frombuffer(data, dtype=np.uint8, count=size)
    ends: _Int = np.flatnonzero(a == 0x0A)
    n_lines = ends.size
    starts: _Int = np.empty(n_lines, dtype=np.int64)
    starts[0] = 0
    starts[1:] = ends[:-1] + 1
    # A "\r" just before the "\n" belongs to the line end.
    nonempty = ends > starts
    crlf = np.zeros(n_lines, dtype=np.bool_)
    crlf[nonempty] = a[ends[nonempty] - 1] == 0x0D
    cends = ends - crlf
    lengths = cends - starts

    classes = _CLASS[a]
    classes[ends[crlf] - 1] = _SEP
    in_token = classes != _SEP
    token_start = in_token.copy()
    token_start[1:] &= ~in_token[:-1]
    token_pos = np.flatnonzero(token_start)
    bounds = np.empty(n_lines + 1, dtype=np.int64)
    bounds[:-1] = starts
    bounds[-1] = a.size
    tokens = np.diff(np.searchsorted(token_pos, bounds))

    has_bad = np.zeros(n_lines, dtype=np.bool_)
    has_bad[np.searchsorted(ends, np.flatnonzero(classes == _BAD))] = True

    first_byte = np.zeros(n_lines, dtype=np.uint8)
    first_byte[nonempty] = a[starts[nonempty]]
    comment = (first_byte == 0x23) & (lengths > 0)
    overlong = lengths > MAX_LINE_BYTES
    if overlong_first:
        overlong[0] = True
    # No token: empty, or spaces and tabs only, is blank; a line of commas is malformed.
    blank = (tokens == 0) & ~comment & ~overlong
    for j in np.flatnonzero(blank & (lengths > 0)).tolist():
        if b"," in data[starts[j] : cends[j]]:
            blank[j] = False
    sample = ~(comment | blank)
    legal = sample & ~overlong & ~has_bad
    return _Layout(n_lines, starts, cends, tokens, comment, overlong, blank, sample, legal)


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
            problem = _rate_error(float(rate_hz))
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
        match = _RATE.fullmatch(line) if len(line) <= MAX_LINE_BYTES else None
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
                f"rate comment value {text!r} is not a number; allowed {_RANGE}; {keeping}",
            )
            return events
        problem = _rate_error(rate)
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
        lay = _layout(data, size, overlong_first)
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
            return _line_fault(data[lay.starts[j] : lay.cends[j]], known) or "unreadable line"

        self._emit(events, sample_lines, good[sample_lines], values, barriers, fault)
        self._line_base += lay.n

    def _channel_count(self, data: bytes, lay: _Layout) -> tuple[int | None, int]:
        """(channel count, line it was found on): configured (line -1), or the first line
        that parses; (None, -1) while no line has."""
        if self._channels is not None:
            return self._channels, -1
        fit = lay.legal & (lay.tokens >= 1) & (lay.tokens <= fr.MAX_CHANNELS)
        for j in np.flatnonzero(fit).tolist():
            if _parse_line(data[lay.starts[j] : lay.cends[j]]) is not None:
                return int(lay.tokens[j]), j
        return None, -1

    def _barriers(
        self, data: bytes, lay: _Layout, good: _Bool, channels: int | None, sample_lines: _Int
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
        starts: _Int,
        cends: _Int,
        good: _Bool,
        tokens: _Int,
        channels: int,
    ) -> tuple[_Float, _Bool]:
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
        spaced = data.translate(_TO_SPACE)  # one byte for one byte: offsets still hold
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
                part = _fromstring(text_of(g_lo, g_hi), (k1 - k0) * channels)
                if part is not None:
                    values[k0:k1] = part.reshape(-1, channels)
                elif step > _SMALL_GROUP_LINES:
                    parse(g_lo, g_hi, _SMALL_GROUP_LINES)
                else:
                    for j in (np.flatnonzero(good[g_lo:g_hi]) + g_lo).tolist():
                        row = _parse_line(data[int(starts[j]) : int(cends[j])])
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
        sample_lines: _Int,
        good: _Bool,
        values: _Float,
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
        self, events: list[Event], sample_lines: _Int, lo: int, hi: int, fault: _FaultFn
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


def format_lines(volts: npt.ArrayLike, decimals: int = 6) -> bytes:
    """Text lines for the sample frames in `volts`, the input format this module reads.

    volts: (channels, n) finite values in volts. Each line holds one sample
    frame, the channel values in fixed point with `decimals` digits after the
    point, comma-separated, ended by "\\n". The decimal strings are correctly
    rounded (Python's float formatting).
    """
    arr = np.asarray(volts, dtype=np.float64)
    if arr.ndim != 2 or arr.shape[0] < 1:
        raise ValueError(f"volts must be (channels, n) with channels >= 1; got shape {arr.shape}")
    if not 0 <= decimals <= 20:
        raise ValueError(f"decimals = {decimals}; allowed 0..20")
    if not np.isfinite(arr).all():
        raise ValueError("volts holds NaN or infinite values, which the text format cannot carry")
    row = ",".join([f"%.{decimals}f"] * arr.shape[0]) + "\n"
    frames = np.ascontiguousarray(arr.T)
    step = 65536  # rows per formatting call, to bound the temporary strings
    parts = [
        ((row * len(block)) % tuple(block.ravel().tolist())).encode("ascii")
        for block in (frames[i : i + step] for i in range(0, frames.shape[0], step))
    ]
    return b"".join(parts)


def rate_comment(rate_hz: float) -> bytes:
    """The comment line `# rate=<Hz>\\n` announcing `rate_hz` (1 Hz to 1 MHz)."""
    rate = float(rate_hz)
    problem = _rate_error(rate)
    if problem is not None:
        raise ValueError(problem)
    text = str(int(rate)) if rate.is_integer() else repr(rate)
    return f"# rate={text}\n".encode("ascii")
