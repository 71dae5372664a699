"""The text input's sample rate: its allowed range, the `# rate=<Hz>` comment, the query.

A text board states its rate in a comment line, `# rate=<Hz>`; the host asks for it again
with RATE_QUERY. `rate_comment` writes that line; the decoder (decoder.py) reads it with
RATE_COMMENT and refuses rates outside the protocol's range (`rate_error`).
"""

from __future__ import annotations

import math
import re

from .. import frames as fr

__all__ = [
    "MAX_RATE_HZ",
    "MIN_RATE_HZ",
    "RATE_COMMENT",
    "RATE_QUERY",
    "RATE_RANGE",
    "no_rate_message",
    "rate_comment",
    "rate_error",
]

MIN_RATE_HZ = fr.MIN_RATE_MILLI_HZ / 1000.0
MAX_RATE_HZ = fr.MAX_RATE_MILLI_HZ / 1000.0

# `# rate=<Hz>`, spaces tolerated around the parts, an optional "Hz" unit.
RATE_COMMENT = re.compile(rb"#\s*rate\s*=\s*(.*?)\s*(?:hz)?\s*", re.IGNORECASE)

RATE_RANGE = "1 Hz to 1 MHz"  # MIN_RATE_HZ to MAX_RATE_HZ, for messages

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


def rate_error(rate: float) -> str | None:
    """Why `rate` (Hz) is refused, or None if it is inside the protocol's range."""
    if not (math.isfinite(rate) and MIN_RATE_HZ <= rate <= MAX_RATE_HZ):
        return f"rate {rate:g} Hz is outside the allowed range {RATE_RANGE}"
    if not fr.MIN_RATE_MILLI_HZ <= round(rate * 1000.0) <= fr.MAX_RATE_MILLI_HZ:
        return f"rate {rate!r} Hz rounds outside the allowed range {RATE_RANGE}"
    return None


def rate_comment(rate_hz: float) -> bytes:
    """The comment line `# rate=<Hz>\\n` announcing `rate_hz` (1 Hz to 1 MHz)."""
    rate = float(rate_hz)
    problem = rate_error(rate)
    if problem is not None:
        raise ValueError(problem)
    text = str(int(rate)) if rate.is_integer() else repr(rate)
    return f"# rate={text}\n".encode("ascii")
