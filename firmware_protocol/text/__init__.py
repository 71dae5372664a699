"""The plain-text line input (PROTOCOL.md section 4): its decoder and its encoder.

A board that prints one sample frame per line (values in volts, separated by
commas, spaces or tabs) is read here. The modules:

    lines.py     the line format: byte grammar, the vectorised line finder, checks, writer
    rate.py      the sample rate: its range, the `# rate=<Hz>` comment, the rate query
    decoder.py   TextDecoder: byte chunks in, events out, in stream order
"""

from .decoder import ADC_BITS, REPORT_EVERY, REPORT_FIRST, TextDecoder
from .lines import MAX_LINE_BYTES, format_lines
from .rate import MAX_RATE_HZ, MIN_RATE_HZ, RATE_QUERY, no_rate_message, rate_comment

__all__ = [
    "ADC_BITS",
    "MAX_LINE_BYTES",
    "MAX_RATE_HZ",
    "MIN_RATE_HZ",
    "RATE_QUERY",
    "REPORT_EVERY",
    "REPORT_FIRST",
    "TextDecoder",
    "format_lines",
    "no_rate_message",
    "rate_comment",
]
