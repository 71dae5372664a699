"""The sample line format: the byte grammar of a line, its checks and its writer.

A sample line holds one frame, values in volts separated by commas, spaces or tabs. Here:
the byte classes, the vectorised pass that finds and classifies every complete line of a
chunk (`layout`), the slow reference check that names a line's fault (`line_fault`), the
one-call parse of many lines (`parse_numbers`) and `format_lines`, which writes the format.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from .. import frames as fr

__all__ = [
    "MAX_LINE_BYTES",
    "TO_SPACE",
    "Bool",
    "Float",
    "Int",
    "Layout",
    "format_lines",
    "layout",
    "line_fault",
    "parse_line",
    "parse_numbers",
]

MAX_LINE_BYTES = 4096
"""Longest line content accepted, in bytes, not counting the line end."""

# Byte classes: 0 part of a number, 1 separator (the line end counts as one), 2 illegal.
_NUM, _SEP, _BAD = 0, 1, 2
_CLASS = np.full(256, _BAD, dtype=np.uint8)
_CLASS[np.frombuffer(b"0123456789+-.eE", dtype=np.uint8)] = _NUM
_CLASS[np.frombuffer(b" ,\t\n", dtype=np.uint8)] = _SEP

# Separators (and the line ends) to the one separator np.fromstring is given.
TO_SPACE = bytes.maketrans(b",\t\r\n", b"    ")

Int = npt.NDArray[np.int64]
Bool = npt.NDArray[np.bool_]
Float = npt.NDArray[np.float64]


def line_fault(line: bytes, channels: int | None) -> str | None:
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
    tokens = line.translate(TO_SPACE).split()
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


def parse_line(line: bytes) -> list[float] | None:
    """The values of a line already known to hold only legal characters, or None."""
    try:
        values = [float(tok) for tok in line.translate(TO_SPACE).split()]
    except ValueError:
        return None
    return values if all(math.isfinite(v) for v in values) else None


def parse_numbers(text: bytes, expected: int) -> Float | None:
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
class Layout:
    """Where the lines of a chunk are and what each is: one entry per complete line."""

    n: int
    starts: Int  # first byte of each line
    cends: Int  # one past its content (before "\\r\\n" or "\\n")
    tokens: Int  # number of tokens
    comment: Bool
    overlong: Bool
    blank: Bool
    sample: Bool  # neither comment nor blank: meant as samples
    legal: Bool  # a sample line of allowed bytes and length


def layout(data: bytes, size: int, overlong_first: bool) -> Layout:
    """The lines of data[:size] found in a few vectorised passes (no loop per byte)."""
    a = np.frombuffer(data, dtype=np.uint8, count=size)
    ends: Int = np.flatnonzero(a == 0x0A)
    n_lines = ends.size
    starts: Int = np.empty(n_lines, dtype=np.int64)
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
    return Layout(n_lines, starts, cends, tokens, comment, overlong, blank, sample, legal)


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
