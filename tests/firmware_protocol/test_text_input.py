"""Tests of the plain-text line input: TextDecoder, format_lines and rate_comment.

What the numbers are checked against (all outside this project):

* Python's float() of the same decimal strings. Decimal to binary64
  conversion is correctly rounded (IEEE Std 754-2019, IEEE Standard for
  Floating-Point Arithmetic, section 5.12.2; CPython's float() uses
  D. M. Gay, "Correctly rounded binary-decimal and decimal-binary
  conversions", AT&T Bell Laboratories Numerical Analysis Manuscript 90-10,
  1990; both from memory), so a parsed value must equal float(text) exactly.
* Exact rational arithmetic (Python's fractions module): the parsed value is
  within half an ulp of the decimal string's exact value, the definition of
  round-to-nearest (IEEE Std 754-2019, section 4.3.1, from memory).
* Python's decimal module (IBM, M. F. Cowlishaw, "General Decimal Arithmetic
  Specification", 2009, quantize with round-half-even) for the digits the
  encoder writes.
* numpy.loadtxt of the same text, an independent text parser.
* A plain per-line reference reader written in this file from PROTOCOL.md
  section 4, for the fuzz tests. Counts and sample indexes are known by
  construction of each input.
"""

from __future__ import annotations

import io
import itertools
import math
import re
from decimal import ROUND_HALF_EVEN, Decimal
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from taprig.firmware_protocol import (
    DeviceInfoReceived,
    Event,
    Gap,
    IndexReset,
    MalformedLine,
    ProtocolViolation,
    SampleBlock,
    SampleFormat,
    make_decoder,
)
from taprig.firmware_protocol.frames import PROTOCOL_VERSION
from taprig.firmware_protocol.text import TextDecoder, format_lines, rate_comment

FAST = settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])

# --- helpers ----------------------------------------------------------------


def feed_all(dec: TextDecoder, data: bytes, cuts: list[int] | None = None) -> list[Event]:
    """Feed `data` split at the positions `cuts` (taken modulo len(data) + 1)."""
    points = sorted({c % (len(data) + 1) for c in cuts or []} - {0, len(data)})
    events: list[Event] = []
    for lo, hi in zip([0, *points], [*points, len(data)], strict=True):
        events += dec.feed(data[lo:hi])
    return events


def samples_of(events: list[Event]) -> tuple[dict[int, tuple[float, ...]], list[int], list[Event]]:
    """Rows by sample index, the sample indexes in gaps, and every other event in order."""
    rows: dict[int, tuple[float, ...]] = {}
    gaps: list[int] = []
    others: list[Event] = []
    for ev in events:
        if isinstance(ev, SampleBlock):
            assert ev.volts.dtype == np.float64 and ev.volts.ndim == 2
            for k, row in enumerate(ev.volts.T.tolist()):
                assert ev.first_index + k not in rows
                rows[ev.first_index + k] = tuple(row)
        elif isinstance(ev, Gap):
            gaps.extend(range(ev.first_index, ev.first_index + ev.count))
        else:
            others.append(ev)
    return rows, gaps, others


def concatenated(events: list[Event]) -> tuple[np.ndarray, np.ndarray]:
    """Sample indexes (n,) and volts (channels, n) of all blocks, in order, put end to end."""
    blocks = [ev for ev in events if isinstance(ev, SampleBlock)]
    assert blocks
    for before, after in itertools.pairwise(blocks):
        assert after.first_index >= before.end_index
    indexes = np.concatenate([np.arange(b.first_index, b.end_index) for b in blocks])
    return indexes, np.concatenate([b.volts for b in blocks], axis=1)


_NUMBER = re.compile(rb"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")


def reference(
    stream: bytes, channels: int | None
) -> tuple[dict[int, tuple[float, ...]], list[int]]:
    """A plain per-line reader of PROTOCOL.md section 4 (no speed tricks).

    Returns the good rows by sample index and the sample indexes of malformed lines.
    """
    rows: dict[int, tuple[float, ...]] = {}
    bad: list[int] = []
    index = 0
    for line in stream.split(b"\n")[:-1]:  # the text after the last "\n" is incomplete
        if line.endswith(b"\r"):
            line = line[:-1]
        if line.startswith(b"#"):
            continue
        if len(line) <= 4096 and re.fullmatch(rb"[ \t]*", line):
            continue
        tokens = [t for t in re.split(rb"[ ,\t]+", line) if t]
        values = [float(t) for t in tokens if _NUMBER.fullmatch(t)]
        fits = len(tokens) == channels if channels else 1 <= len(tokens) <= 16
        if (
            len(line) <= 4096
            and fits
            and len(values) == len(tokens)
            and all(math.isfinite(v) for v in values)
        ):
            channels = len(tokens)
            rows[index] = tuple(values)
        else:
            bad.append(index)
        index += 1
    return rows, bad


# --- hypothesis strategies -----------------------------------------------------

finite = st.floats(min_value=-1e6, max_value=1e6, allow_nan=False, allow_infinity=False)
styles = st.sampled_from(["{!r}", "{:.3f}", "{:.6e}", "{:g}", "{:.9f}", "{:+.2E}"])
number_text = st.builds(lambda v, s: s.format(v).encode("ascii"), finite, styles)
separator = st.sampled_from([b",", b" ", b"\t", b", ", b" ,\t ", b"  "])
edge_separator = st.sampled_from([b"", b"", b" ", b",", b"\t "])


@st.composite
def good_line(draw: st.DrawFn, channels: int) -> tuple[bytes, tuple[float, ...]]:
    """A well-formed line of `channels` values and the values Python's float() reads."""
    tokens = [draw(number_text) for _ in range(channels)]
    body = tokens[0]
    for tok in tokens[1:]:
        body += draw(separator) + tok
    line = draw(edge_separator) + body + draw(edge_separator)
    return line, tuple(float(t) for t in tokens)


@st.composite
def junk_line(draw: st.DrawFn, channels: int) -> bytes:
    """A line that is certainly malformed for `channels` values (not blank, not a comment)."""
    good, _ = draw(good_line(channels))
    tokens = good.replace(b",", b" ").replace(b"\t", b" ").split()
    kind = draw(st.integers(0, 7))
    if kind == 0:  # wrong count
        n = draw(st.integers(1, channels + 3).filter(lambda k: k != channels))
        line = b",".join((tokens * 4)[:n])
    elif kind == 1:  # a word where a number belongs
        word = draw(st.sampled_from([b"nan", b"inf", b"NaN", b"-inf", b"abc", b"0x1f", b"1_0"]))
        tokens[draw(st.integers(0, channels - 1))] = word
        line = b" ".join(tokens)
    elif kind == 2:  # not ASCII
        line = good + draw(st.sampled_from([b"\xff", b"\xc3\xa9", b"\x80\x00"]))
    elif kind == 3:  # characters of numbers, not a number
        bad = draw(st.sampled_from([b"1.2.3", b"1e", b"--1", b"+", b".", b"e5", b"1e5.5", b"1-2"]))
        tokens[draw(st.integers(0, channels - 1))] = bad
        line = b",".join(tokens)
    elif kind == 4:  # overlong
        line = b"1," * 2100
    elif kind == 5:  # not finite
        tokens[0] = b"1e999"
        line = b"\t".join(tokens)
    elif kind == 6:  # separators only, a comma among them
        line = draw(st.sampled_from([b",", b" , ", b",,,", b"\t,"]))
    else:  # arbitrary bytes, kept only if the reference reader refuses them
        line = draw(st.binary(min_size=1, max_size=40)).replace(b"\n", b"")
        line = line.lstrip(b"#") or b"?"
    _, bad_idx = reference(line + b"\n", channels)
    if not bad_idx:  # the arbitrary bytes happened to be a good line or blank
        line = b"junk " + line.replace(b"\r", b"")
    return line


@st.composite
def mixed_stream(
    draw: st.DrawFn, channels: int
) -> tuple[bytes, dict[int, tuple[float, ...]], list[int]]:
    """A stream of good, junk, comment and blank lines with what a reader must find in it."""
    kinds = draw(st.lists(st.sampled_from("gggggjcb"), min_size=1, max_size=40))
    crlf = draw(st.sampled_from([b"\n", b"\r\n", None]))
    out = b""
    rows: dict[int, tuple[float, ...]] = {}
    bad: list[int] = []
    index = 0
    for kind in kinds:
        end = crlf if crlf is not None else draw(st.sampled_from([b"\n", b"\r\n"]))
        if kind == "g":
            line, values = draw(good_line(channels))
            rows[index] = values
            index += 1
        elif kind == "j":
            line = draw(junk_line(channels))
            bad.append(index)
            index += 1
        elif kind == "c":
            line = b"# " + draw(st.sampled_from([b"note", b"", b"x,y,z", b"1,2,3", b"\xff"]))
        else:
            line = draw(st.sampled_from([b"", b" ", b"\t \t"]))
        out += line + end
    return out, rows, bad


cut_points = st.lists(st.integers(0, 1 << 16), max_size=12)


# --- exact values -------------------------------------------------------------


def test_round_trip_values_equal_python_float_of_the_same_text() -> None:
    """Decoded volts equal float() of the written decimal strings, bit for bit.

    References: correct rounding of decimal to binary64 (IEEE Std 754-2019,
    section 5.12.2, from memory) as done by Python's float(); a second check
    with exact fractions that every value is within half an ulp of its
    decimal string; numpy.loadtxt of the same text as an independent parser;
    and Python's decimal module (General Decimal Arithmetic Specification,
    round-half-even quantize) for the digits format_lines writes.
    """
    rng = np.random.default_rng(20240611)
    volts = np.concatenate(
        [
            rng.uniform(-10.0, 10.0, (4, 3000)),
            rng.normal(0.0, 1e-4, (4, 1000)),
            rng.uniform(-1e5, 1e5, (4, 500)),
        ],
        axis=1,
    )
    for decimals in (6, 9, 0):
        text = format_lines(volts, decimals)
        dec = TextDecoder(channels=4, rate_hz=51200.0)
        index, got = concatenated(dec.feed(text))
        lines = text.splitlines()
        expected = np.array([[float(t) for t in line.split(b",")] for line in lines]).T
        assert np.array_equal(index, np.arange(volts.shape[1]))
        assert got.shape == volts.shape
        assert np.array_equal(got, expected)
        assert np.array_equal(got, np.loadtxt(io.BytesIO(text), delimiter=",", ndmin=2).T)
        sample = [(r, c) for r in range(0, len(lines), 37) for c in range(4)]
        quantum = Decimal(1).scaleb(-decimals)
        for r, c in sample:
            token = lines[r].split(b",")[c].decode()
            exact = Fraction(token)
            value = float(got[c, r])
            assert abs(Fraction(value) - exact) <= Fraction(math.ulp(value)) / 2
            written = Decimal(float(volts[c, r])).quantize(quantum, rounding=ROUND_HALF_EVEN)
            assert Decimal(token) == written


def test_known_binary64_value_of_one_tenth() -> None:
    """0.1 reads as 0x1.999999999999ap-4, the binary64 nearest to 1/10.

    Reference: common practice / textbook value (D. Goldberg, "What every
    computer scientist should know about floating-point arithmetic", ACM
    Computing Surveys 23(1), 1991, discusses 0.1; the hex digits from memory),
    cross-checked with float.fromhex.
    """
    dec = TextDecoder(channels=3, rate_hz=1000.0)
    _, got = concatenated(dec.feed(b"0.1,-0.5,1e-3\n"))
    assert got[0, 0] == float.fromhex("0x1.999999999999ap-4")
    assert got[1, 0] == -0.5
    assert got[2, 0] == float("1e-3")


# --- chunking, junk, reference reader ----------------------------------------------


@FAST
@given(st.data(), st.integers(1, 5), cut_points)
def test_any_chunking_gives_the_same_events(
    data: st.DataObject, channels: int, cuts: list[int]
) -> None:
    """Split anywhere (mid-number, mid "\\r\\n"), the decoder yields the same samples and events.

    Reference: the values are compared with Python's float() of the written
    strings (IEEE Std 754-2019, section 5.12.2, correct rounding, from memory);
    the indexes are known by construction of the stream.
    """
    stream, rows, bad = data.draw(mixed_stream(channels))
    whole = TextDecoder(channels=channels, rate_hz=2048.0)
    split = TextDecoder(channels=channels, rate_hz=2048.0)
    events_whole = feed_all(whole, stream)
    events_split = feed_all(split, stream, cuts)
    assert samples_of(events_whole) == samples_of(events_split)
    if rows:
        index_w, volts_w = concatenated(events_whole)
        index_s, volts_s = concatenated(events_split)
        assert np.array_equal(index_w, index_s) and np.array_equal(volts_w, volts_s)
    assert whole.stats.malformed_lines == split.stats.malformed_lines == len(bad)
    assert whole.stats.samples == split.stats.samples == len(rows)


@FAST
@given(st.data(), st.integers(1, 6), cut_points)
def test_junk_lines_are_counted_and_the_samples_around_them_are_exact(
    data: st.DataObject, channels: int, cuts: list[int]
) -> None:
    """Every inserted junk line is one malformed line and one gap sample at its index.

    Reference: values against Python's float() of the written strings (IEEE
    Std 754-2019, section 5.12.2, from memory); counts and indexes by
    construction of the stream.
    """
    stream, rows, bad = data.draw(mixed_stream(channels))
    dec = TextDecoder(channels=channels, rate_hz=500.0)
    got_rows, gaps, others = samples_of(feed_all(dec, stream, cuts))
    assert got_rows == rows
    assert gaps == bad
    assert dec.stats.malformed_lines == len(bad) == dec.stats.samples_lost
    reported = [ev for ev in others if isinstance(ev, MalformedLine)]
    assert len(reported) == min(len(bad), 10)
    assert not [ev for ev in others if isinstance(ev, ProtocolViolation)]


_PIECES = st.sampled_from(
    [b"1", b"23", b"-", b"+", b".", b"e", b"E", b"5", b"0.25", b"1e999", b",", b" ", b"\t",
     b"\n", b"\n", b"\n", b"\r\n", b"\r", b"#", b"# rate=100\n", b"x", b"\xff", b"nan", b"\x00"]
)  # fmt: skip


@FAST
@given(
    st.lists(st.one_of(_PIECES, st.binary(max_size=6)), max_size=80),
    st.sampled_from([None, 1, 2, 3]),
    cut_points,
)
def test_agrees_with_a_plain_reference_reader(
    pieces: list[bytes], channels: int | None, cuts: list[int]
) -> None:
    """On number-like garbage the vectorised decoder finds what a per-line reader finds.

    Reference: the reader in this file, written from PROTOCOL.md section 4
    with Python's float() (IEEE Std 754-2019, section 5.12.2, from memory).
    """
    stream = b"".join(pieces)
    rows, bad = reference(stream, channels)
    dec = TextDecoder(channels=channels)
    got_rows, gaps, _ = samples_of(feed_all(dec, stream, cuts))
    assert got_rows == rows
    assert gaps == bad
    assert dec.stats.malformed_lines == len(bad)


@FAST
@given(st.binary(max_size=600), st.sampled_from([None, 1, 4]), cut_points)
def test_never_raises_on_arbitrary_bytes(
    data: bytes, channels: int | None, cuts: list[int]
) -> None:
    """Any bytes in any chunking decode without an exception, with consistent counts.

    Reference: the counts of lines are compared with the plain reader in this file.
    """
    dec = TextDecoder(channels=channels, rate_hz=100.0)
    events = feed_all(dec, data, cuts)
    rows, bad = reference(data, channels)
    got_rows, gaps, _ = samples_of(events)
    assert len(got_rows) == dec.stats.samples == len(rows)
    assert len(gaps) == dec.stats.malformed_lines == len(bad)
    for ev in events:
        if isinstance(ev, SampleBlock):
            assert np.isfinite(ev.volts).all() and ev.volts.flags.c_contiguous


def test_byte_at_a_time_equals_one_call() -> None:
    """Fed one byte per call (every possible split), the events match a single call.

    Reference: values against Python's float() of the strings (IEEE Std
    754-2019, section 5.12.2, from memory).
    """
    stream = b"# rate=2000\r\n1.5, -2.25\r\n\r\nbad\r\n3e-3\t4E2\r\n# c\n-0.0 ,7\n"
    one = TextDecoder()
    many = TextDecoder()
    events_one = one.feed(stream)
    events_many = [ev for k in range(len(stream)) for ev in many.feed(stream[k : k + 1])]
    assert samples_of(events_one) == samples_of(events_many)
    rows, gaps, _ = samples_of(events_one)
    assert rows == {
        0: (float("1.5"), float("-2.25")),
        2: (float("3e-3"), float("4E2")),
        3: (float("-0.0"), float("7")),
    }
    assert gaps == [1]


# --- line endings, separators, blocks ------------------------------------------------


def test_crlf_and_lf_streams_decode_alike_even_with_the_pair_split() -> None:
    """ "\\r\\n" and "\\n" endings give the same samples, also with "\\r" and "\\n" in two calls.

    Reference: numpy.loadtxt of the LF text (an independent parser).
    """
    rng = np.random.default_rng(7)
    lf = format_lines(rng.uniform(-5, 5, (3, 200)), 5)
    crlf = lf.replace(b"\n", b"\r\n")
    cuts = [m.start() + 1 for m in re.finditer(rb"\r\n", crlf)][::3]  # between "\r" and "\n"
    a = TextDecoder(channels=3, rate_hz=10.0)
    b = TextDecoder(channels=3, rate_hz=10.0)
    _, va = concatenated(a.feed(lf))
    _, vb = concatenated(feed_all(b, crlf, cuts))
    assert np.array_equal(va, vb)
    assert np.array_equal(va, np.loadtxt(io.BytesIO(lf), delimiter=",").T)
    assert a.stats.malformed_lines == b.stats.malformed_lines == 0


def test_mixed_separators_and_edges() -> None:
    """Commas, spaces and tabs mix; runs count as one; leading and trailing ones are ignored.

    Reference: Python's float() of each token.
    """
    dec = TextDecoder(channels=3, rate_hz=10.0)
    rows, gaps, _ = samples_of(dec.feed(b" 1,\t2  ,3 \t\n,4,5,6,\n\t7\t\t8 9\n1,,2\n"))
    assert rows == {0: (1.0, 2.0, 3.0), 1: (4.0, 5.0, 6.0), 2: (7.0, 8.0, 9.0)}
    assert gaps == [3]  # "1,,2": two values


def test_parse_failures_in_a_long_chunk_cost_only_their_own_lines() -> None:
    """Lines like "1.2.3" pass the character check and fail the one-call parse; only they are lost.

    A 2000-line chunk with such lines, a comment and a blank line in it (so
    the group and sub-group fallbacks both run). Reference: numpy.loadtxt of
    the good lines alone, an independent parser; indexes by construction.
    """
    rng = np.random.default_rng(5)
    good = format_lines(rng.uniform(-3, 3, (3, 2000)), 7).splitlines()
    bad_at = {0, 17, 300, 301, 777, 1999}
    lines: list[bytes] = []
    for k, line in enumerate(good):
        lines.append(b"1.2.3,1e,5" if k in bad_at else line)
        if k == 900:
            lines += [b"# halfway", b""]
    stream = b"\n".join(lines) + b"\n"
    dec = TextDecoder(channels=3, rate_hz=100.0)
    rows, gaps, _ = samples_of(dec.feed(stream))
    assert gaps == sorted(bad_at)
    keep = [k for k in range(2000) if k not in bad_at]
    expected = np.loadtxt(io.BytesIO(b"\n".join(good[k] for k in keep)), delimiter=",")
    assert np.array_equal(np.array([rows[k] for k in keep]), expected)


def test_consecutive_good_lines_form_one_block_per_feed() -> None:
    """1000 good lines in one call are one SampleBlock of shape (channels, 1000).

    Reference: numpy.loadtxt of the same text.
    """
    text = format_lines(np.random.default_rng(3).uniform(-1, 1, (2, 1000)))
    events = TextDecoder(channels=2, rate_hz=10.0).feed(text)
    blocks = [ev for ev in events if isinstance(ev, SampleBlock)]
    assert len(blocks) == 1 and blocks[0].volts.shape == (2, 1000)
    assert np.array_equal(blocks[0].volts, np.loadtxt(io.BytesIO(text), delimiter=",").T)


# --- comments, rate, info ---------------------------------------------------------


def test_rate_comments_set_the_rate_and_the_last_one_counts() -> None:
    """`# rate=<Hz>` (spaces tolerated) announces the rate; DeviceInfo follows each change.

    Reference: PROTOCOL.md section 3, INFO rate_milli_hz = rate × 1000; the
    synthesized INFO fields are those the brief of the text input names.
    """
    dec = TextDecoder(full_scale_v=[5.0, 2.5])
    events = dec.feed(
        b"# rate=1000\n1,2\n#rate = 51200\n3,4\n# rate=51200\n# rate = 25.6 Hz\n5,6\n"
    )
    kinds = [type(ev).__name__ for ev in events]
    assert kinds == [
        "DeviceInfoReceived",
        "SampleBlock",
        "DeviceInfoReceived",
        "SampleBlock",
        "DeviceInfoReceived",
        "SampleBlock",
    ]
    infos = [ev.info for ev in events if isinstance(ev, DeviceInfoReceived)]
    assert [i.rate_milli_hz for i in infos] == [1_000_000, 51_200_000, 25_600]
    info = infos[-1]
    assert info == dec.info
    assert info.protocol_version == PROTOCOL_VERSION
    assert info.sample_format is SampleFormat.FLOAT32
    assert info.device_id == "text-input" and info.firmware == ""
    assert [(c.full_scale_v, c.adc_bits) for c in info.channels] == [(5.0, 24), (2.5, 24)]
    assert dec.rate_hz == 25.6
    assert dec.stats.extra["comment_lines"] == 4


def test_a_rate_comment_overrides_the_configured_rate() -> None:
    """The configured rate is announced at the first call; a comment replaces it.

    Reference: PROTOCOL.md section 3 (rate_milli_hz = rate × 1000).
    """
    dec = TextDecoder(channels=1, rate_hz=100.0, device_id="bench-7")
    assert dec.info is not None and dec.info.rate_milli_hz == 100_000
    first = dec.feed(b"")
    assert first == [DeviceInfoReceived(dec.info)]
    events = dec.feed(b"0.5\n" + rate_comment(48000) + b"0.25\n")
    infos = [ev.info for ev in events if isinstance(ev, DeviceInfoReceived)]
    assert [i.rate_milli_hz for i in infos] == [48_000_000]
    assert infos[0].device_id == "bench-7"


@pytest.mark.parametrize("value", [b"0", b"2e6", b"abc", b"nan", b"-5", b"inf", b""])
def test_absurd_rates_are_refused_and_the_previous_rate_kept(value: bytes) -> None:
    """A rate outside 1 Hz..1 MHz or not a number is a ProtocolViolation naming it and the range.

    Reference: PROTOCOL.md section 3 (rate from 1 Hz to 1 MHz).
    """
    dec = TextDecoder(channels=1, rate_hz=200.0)
    dec.feed(b"")
    events = dec.feed(b"# rate=" + value + b"\n1\n")
    violations = [ev for ev in events if isinstance(ev, ProtocolViolation)]
    assert len(violations) == 1
    message = violations[0].message
    assert repr(value.decode()) in message and "1 Hz to 1 MHz" in message
    assert "keeping 200 Hz" in message
    assert dec.rate_hz == 200.0 and dec.stats.protocol_errors == 1
    assert not [ev for ev in events if isinstance(ev, DeviceInfoReceived)]


def test_samples_without_a_rate_warn_once_and_still_arrive() -> None:
    """No rate known: one ProtocolViolation asking for `# rate=<Hz>`; the blocks still come.

    Reference: values against Python's float() of the strings.
    """
    dec = TextDecoder(channels=2)
    events = dec.feed(b"1,2\n3,4\n") + dec.feed(b"5,6\n")
    violations = [ev for ev in events if isinstance(ev, ProtocolViolation)]
    assert len(violations) == 1 and '"# rate=<Hz>"' in violations[0].message
    assert "configuration" in violations[0].message
    assert isinstance(events[0], ProtocolViolation)
    rows, _, _ = samples_of(events)
    assert rows == {0: (1.0, 2.0), 1: (3.0, 4.0), 2: (5.0, 6.0)}
    assert dec.info is None
    later = dec.feed(b"# rate=10\n")
    assert [type(ev) for ev in later] == [DeviceInfoReceived] and dec.info is not None


def test_only_a_first_character_hash_makes_a_comment() -> None:
    """A "#" after leading spaces is a junk character, not a comment.

    Reference: PROTOCOL.md section 4 ("a line whose first character is #").
    """
    dec = TextDecoder(channels=1, rate_hz=10.0)
    rows, gaps, others = samples_of(dec.feed(b"# fine\n  # not a comment\n1\n"))
    assert rows == {1: (1.0,)} and gaps == [0]
    assert isinstance(others[-1], MalformedLine) and others[-1].line_number == 2


# --- channel count ---------------------------------------------------------------


def test_channels_are_taken_from_the_first_well_formed_line() -> None:
    """Lines before the first good line are malformed; then the count is fixed.

    Reference: PROTOCOL.md section 4; counts and indexes by construction.
    """
    dec = TextDecoder(rate_hz=1000.0)
    events = dec.feed(b"abc\n1.2.3,4\n\n1 2 3\n4 5\n6 7 8\n9 10 11 12\n")
    rows, gaps, others = samples_of(events)
    assert dec.channels == 3
    assert rows == {2: (1.0, 2.0, 3.0), 4: (6.0, 7.0, 8.0)}
    assert gaps == [0, 1, 3, 5]
    infos = [ev for ev in others if isinstance(ev, DeviceInfoReceived)]
    assert len(infos) == 1 and infos[0].info.channel_count == 3
    reasons = {ev.line_number: ev.reason for ev in others if isinstance(ev, MalformedLine)}
    assert set(reasons) == {1, 2, 5, 7}
    assert reasons[5] == "2 values; expected 3" and reasons[7] == "4 values; expected 3"
    assert "not a number" in reasons[2]


def test_wrong_counts_with_configured_channels_merge_into_one_gap() -> None:
    """Consecutive malformed lines are one Gap with their count, each one a MalformedLine.

    Reference: PROTOCOL.md section 4; counts by construction.
    """
    dec = TextDecoder(channels=4, rate_hz=1000.0)
    events = dec.feed(b"1 2 3 4\n1 2 3\n1 2 3 4 5\n# between\n\n1\n5 6 7 8\n")
    gaps = [ev for ev in events if isinstance(ev, Gap)]
    assert gaps == [Gap(1, 3)]
    lines = [ev for ev in events if isinstance(ev, MalformedLine)]
    assert [(m.line_number, m.reason) for m in lines] == [
        (2, "3 values; expected 4"),
        (3, "5 values; expected 4"),
        (6, "1 value; expected 4"),
    ]
    assert dec.stats.malformed_lines == 3 and dec.stats.samples == 2


def test_malformed_line_events_are_rate_limited_but_all_counted() -> None:
    """2500 bad lines: reported are the first 10 and the 1000th and 2000th; all are counted.

    Reference: the rate limit stated for this decoder; counts by construction.
    """
    stream = b"1,2\n" + b"oops\n" * 2500 + b"3,4\n"
    for cuts in ([], list(range(7, len(stream), 4099))):
        dec = TextDecoder(channels=2, rate_hz=10.0)
        events = feed_all(dec, stream, cuts)
        reported = [ev.line_number for ev in events if isinstance(ev, MalformedLine)]
        assert reported == [*range(2, 12), 1001, 2001]
        rows, gaps, _ = samples_of(events)
        assert gaps == list(range(1, 2501)) and rows[2501] == (3.0, 4.0)
        assert dec.stats.malformed_lines == 2500


# --- overlong, non-ASCII, non-finite -------------------------------------------------


@pytest.mark.parametrize("chunk", [None, 100, 4097, 1])
def test_overlong_lines_are_malformed_in_any_chunking(chunk: int | None) -> None:
    """A line over 4096 bytes is one malformed line; an overlong comment is still a comment.

    Reference: the 4096-byte line limit of this decoder; indexes by construction.
    """
    long_line = b"1," * 2100 + b"1"
    ok_line = b"0" * 4095 + b"7"
    stream = b"5\n" + long_line + b"\r\n#" + b"c" * 5000 + b"\n" + ok_line + b"\r\n6\n"
    cuts = list(range(chunk, len(stream), chunk)) if chunk else []
    dec = TextDecoder(channels=1, rate_hz=10.0)
    rows, gaps, others = samples_of(feed_all(dec, stream, cuts))
    assert rows == {0: (5.0,), 2: (float(ok_line),), 3: (6.0,)}
    assert gaps == [1]
    assert others[-1] == MalformedLine(2, "longer than 4096 bytes")
    assert dec.stats.extra["comment_lines"] == 1


def test_non_ascii_nan_and_infinite_values_are_malformed() -> None:
    """Non-ASCII bytes, "nan", "inf" and values overflowing binary64 are junk.

    Reference: IEEE Std 754-2019 (1e999 exceeds the binary64 maximum
    1.7976931348623157e308, from memory, checked with sys.float_info.max).
    """
    import sys

    assert float("1e999") > sys.float_info.max
    dec = TextDecoder(channels=2, rate_hz=10.0)
    stream = b"nan,1\n1,inf\n1,\xc3\xa92\n-1e999,0\n1,2\xff\n0.5,0.25\n"
    rows, gaps, others = samples_of(dec.feed(stream))
    assert rows == {5: (0.5, 0.25)} and gaps == [0, 1, 2, 3, 4]
    reasons = [ev.reason for ev in others if isinstance(ev, MalformedLine)]
    assert reasons[2] == "byte 0xc3 at column 3 is not ASCII"
    assert reasons[3] == "'-1e999' is not a finite number"
    assert reasons[0] == "character 'n' at column 1 is not part of a number"


# --- link reset, construction, registry, encoder --------------------------------------


def test_reset_link_drops_the_partial_line_and_restarts_indexes() -> None:
    """After reset_link the half line is gone, indexes restart at 0 (IndexReset), info is kept.

    Reference: counts and indexes by construction.
    """
    dec = TextDecoder(channels=2, rate_hz=10.0)
    dec.feed(b"1,2\n3,4\n5,")
    info = dec.info
    dec.reset_link()
    events = dec.feed(b"6\n7,8\nbad\n")
    assert events[0] == IndexReset(2, 0)
    rows, gaps, others = samples_of(events)
    assert rows == {1: (7.0, 8.0)} and gaps == [0, 2]  # "6" is a line of one value now
    assert dec.stats.index_resets == 1
    assert dec.info == info and not [ev for ev in others if isinstance(ev, DeviceInfoReceived)]
    assert [ev.line_number for ev in others if isinstance(ev, MalformedLine)] == [1, 3]


@pytest.mark.parametrize(
    "kwargs",
    [
        {"rate_hz": 0.5},
        {"rate_hz": 2e6},
        {"rate_hz": float("nan")},
        {"channels": 0},
        {"channels": 17},
        {"channels": 3, "full_scale_v": [1.0, 2.0]},
        {"full_scale_v": 0.0},
        {"full_scale_v": [1.0, -1.0]},
        {"device_id": "x" * 17},
    ],
)
def test_bad_configuration_is_refused(kwargs: dict[str, object]) -> None:
    """Configuration outside the INFO limits raises ValueError at construction.

    Reference: PROTOCOL.md section 3 (rate 1 Hz..1 MHz, 1..16 channels,
    full_scale_v > 0, device_id up to 16 ASCII characters).
    """
    with pytest.raises(ValueError):
        TextDecoder(**kwargs)  # type: ignore[arg-type]


def test_registered_as_the_text_format() -> None:
    """make_decoder("text", ...) builds this decoder with keyword options."""
    dec = make_decoder("text", channels=2, rate_hz=10.0)
    assert isinstance(dec, TextDecoder) and dec.name == "text"
    rows, _, _ = samples_of(dec.feed(b"1,2\n"))
    assert rows == {0: (1.0, 2.0)}


def test_rate_comment_and_format_lines_refuse_what_the_format_cannot_carry() -> None:
    """rate_comment writes `# rate=<Hz>`; format_lines refuses NaN and bad shapes.

    Reference: PROTOCOL.md sections 3 and 4.
    """
    assert rate_comment(51200) == b"# rate=51200\n"
    assert rate_comment(25.6) == b"# rate=25.6\n"
    with pytest.raises(ValueError):
        rate_comment(0.5)
    with pytest.raises(ValueError):
        format_lines(np.array([[1.0, np.nan]]))
    with pytest.raises(ValueError):
        format_lines(np.zeros(3))
    assert format_lines(np.array([[1.0, -2.5], [0.125, 3.0]]), 3) == b"1.000,0.125\n-2.500,3.000\n"
