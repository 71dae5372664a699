"""`taprigd probe` (daemon/probe.py): identify a device, stream, report what arrived.

Runs against the simulated test piece on a real pseudo-terminal through pyserial.
"""

from __future__ import annotations

import pytest

from taprig.daemon.probe import probe
from taprig.firmware_protocol.simpiece.ports import PtyPort


def test_binary_probe_identifies_streams_and_sees_the_taps() -> None:
    """The force peak read back over the link is the peak the simulated hammer struck:
    the instrument quantises to its ADC and adds a little noise, so within 2 %."""
    report = probe("simulated", "binary", seconds=0.8, taps=2)
    info = report.info
    assert info is not None and info.rate_hz == 51_200.0 and info.channel_count >= 2
    assert report.samples > 0 and report.stats.frames_ok > 0
    assert report.stats.crc_errors == 0 and report.stats.samples_lost == 0
    assert any(c.startswith("connected") for c in report.link_changes), report.link_changes
    assert report.messages == []
    assert len(report.taps) == 2
    for tap in report.taps:
        assert tap.measured_n is not None, tap
        assert tap.measured_n == pytest.approx(tap.asked_n, rel=0.02), tap


def test_text_probe_counts_samples_and_no_malformed_lines() -> None:
    report = probe("simulated", "text", seconds=0.5)
    assert report.samples > 0
    assert report.stats.malformed_lines == 0
    assert report.sample_rate_seen_hz > 0
    assert report.taps == []


def test_a_device_that_never_sends_is_reported_not_raised() -> None:
    """A pseudo-terminal nobody writes to: the probe gives up with a message, no exception."""
    port = PtyPort()
    try:
        url = port.url
        report = probe(url, "binary", seconds=0.2, connect_s=0.5)
    finally:
        port.close()
    assert report.info is None and report.samples == 0
    assert report.messages == [f"no data from {url} within the time allowed"]
