"""The simulated test piece on a real link: pyserial on a pseudo-terminal and on TCP.

Each test starts the instrument, talks to it with pyserial exactly as the
daemon does, and waits on conditions with deadlines (never fixed sleeps).
"""

from __future__ import annotations

import dataclasses
import itertools
import json
import math
import socket
import time
from collections.abc import Callable, Iterator
from pathlib import Path

import numpy as np
import pytest
import serial

from taprig.firmware_protocol import (
    AckReceived,
    AckResult,
    BinaryDecoder,
    Command,
    DeviceInfoReceived,
    Event,
    FrameEncoder,
    Gap,
    Opcode,
    SampleBlock,
    StatusReceived,
    make_decoder,
)
from taprig.firmware_protocol.frames import frame
from taprig.firmware_protocol.simpiece import (
    accelerance,
    demo_panel,
    half_sine,
    half_sine_spectrum,
    modal_acceleration,
)
from taprig.firmware_protocol.simpiece.control import ControlServer
from taprig.firmware_protocol.simpiece.instrument import (
    InstrumentSettings,
    SimulatedPiece,
    open_simulated,
)
from taprig.firmware_protocol.simpiece.ports import TcpPort
from taprig.firmware_protocol.simpiece.synth import converter_filter


class Host:
    """A minimal host: pyserial port + decoder, collecting events."""

    def __init__(self, url: str, fmt: str = "binary") -> None:
        self.port = serial.serial_for_url(url, timeout=0.02)
        self.decoder = make_decoder(fmt, **({"rate_hz": None} if fmt == "text" else {}))
        self.enc = FrameEncoder()
        self.events: list[Event] = []
        self.tag = 0

    def send(self, opcode: Opcode, argument: int = 0) -> int:
        self.tag += 1
        self.port.write(self.enc.command(Command(opcode, self.tag, argument)))
        return self.tag

    def pump(self) -> None:
        data = self.port.read(65536)
        if data:
            self.events.extend(self.decoder.feed(data))

    def wait(self, cond: Callable[[], bool], timeout: float = 5.0) -> None:
        deadline = time.monotonic() + timeout
        while not cond():
            if time.monotonic() > deadline:
                raise AssertionError("condition not met in time")
            self.pump()

    def ack(self, tag: int) -> AckReceived | None:
        for e in self.events:
            if isinstance(e, AckReceived) and e.ack.tag == tag:
                return e
        return None

    def blocks(self) -> list[SampleBlock]:
        return [e for e in self.events if isinstance(e, SampleBlock)]

    def samples(self) -> int:
        return sum(b.count for b in self.blocks())

    def close(self) -> None:
        self.port.close()


@pytest.fixture
def piece() -> Iterator[SimulatedPiece]:
    inst = open_simulated("pty")
    try:
        yield inst
    finally:
        inst.close()


def stitched(blocks: list[SampleBlock]) -> tuple[int, np.ndarray]:
    """First index and (channels, n) volts of contiguous blocks."""
    first = blocks[0].first_index
    for a, b in itertools.pairwise(blocks):
        assert b.first_index == a.end_index, "unexpected gap"
    return first, np.concatenate([b.volts for b in blocks], axis=1)


def test_commands_are_acknowledged(piece: SimulatedPiece) -> None:
    host = Host(piece.url)
    try:
        ping = host.send(Opcode.PING, 0xCAFE)
        ident = host.send(Opcode.IDENTIFY)
        host.wait(lambda: host.ack(ping) is not None and host.ack(ident) is not None)
        assert host.ack(ping).ack.value == 0xCAFE  # type: ignore[union-attr]
        host.wait(lambda: any(isinstance(e, DeviceInfoReceived) for e in host.events))
        bad_rate = host.send(Opcode.SET_RATE, 5)  # 5 mHz: absurd
        ok_rate = host.send(Opcode.SET_RATE, 25_600_000)
        host.wait(lambda: host.ack(bad_rate) is not None and host.ack(ok_rate) is not None)
        assert host.ack(bad_rate).ack.result is AckResult.BAD_ARGUMENT  # type: ignore[union-attr]
        assert host.ack(ok_rate).ack.value == 25_600_000  # type: ignore[union-attr]
        start = host.send(Opcode.START)
        host.wait(lambda: host.samples() > 2000)
        busy = host.send(Opcode.SET_RATE, 51_200_000)
        host.wait(lambda: host.ack(busy) is not None)
        assert host.ack(start).ack.result is AckResult.OK  # type: ignore[union-attr]
        assert host.ack(busy).ack.result is AckResult.BUSY  # type: ignore[union-attr]
        assert host.decoder.info is not None and host.decoder.info.rate_hz == 25_600.0
        host.port.write(frame(0x81, 99, b"\x7f\x00\x09\x00"))  # opcode 0x7F, tag 9
        host.wait(lambda: host.ack(9) is not None)
        assert host.ack(9).ack.result is AckResult.UNKNOWN_COMMAND  # type: ignore[union-attr]
    finally:
        host.close()


def test_stream_rate_and_continuity(piece: SimulatedPiece) -> None:
    """Sample frames arrive at the announced rate, contiguous, from index 0 after START."""
    host = Host(piece.url)
    try:
        host.send(Opcode.START)
        host.wait(lambda: host.samples() >= 256)
        t0, n0 = time.monotonic(), host.samples()
        host.wait(lambda: host.samples() >= n0 + 51_200, timeout=5.0)
        rate = (host.samples() - n0) / (time.monotonic() - t0)
        first, volts = stitched(host.blocks())
        assert first == 0
        assert volts.shape[0] == 3
        assert 0.8 * 51_200 < rate < 1.25 * 51_200
        assert host.decoder.stats.crc_errors == 0
        assert any(isinstance(e, StatusReceived) for e in host.events)
    finally:
        host.close()


def test_tap_arrives_exactly() -> None:
    """Without the anti-alias filter the streamed tap equals the exact modal response.

    Reference: the closed-form model response (checked in test_simulated_physics against
    scipy.integrate.solve_ivp) and the half-sine force, point-sampled at k / rate; the
    residual must be at the level of the configured sensor noise (20 µV rms) plus half an
    LSB of a 24-bit ±5 V converter.
    """
    piece = open_simulated("pty", settings=InstrumentSettings(anti_alias=False))
    host = Host(piece.url)
    try:
        host.send(Opcode.START)
        host.wait(lambda: host.samples() >= 1024)
        rec = piece.tap("C4", force_n=40.0, width_s=0.001)
        assert rec is not None
        n_rec = 8192
        host.wait(lambda: host.blocks()[-1].end_index > rec.first_index + n_rec)
        first, volts = stitched(host.blocks())
        lo = rec.first_index - 100 - first
        seg = volts[:, lo : lo + n_rec]
        t = (first + lo + np.arange(n_rec)) / piece.rate_hz
        sens = np.asarray(piece.sensitivities())
        force = half_sine(t - rec.t0_s, rec.width_s, rec.peak_n) * sens[0]
        accel = modal_acceleration(piece.model, "C4", t, rec.t0_s, rec.width_s, rec.peak_n)
        expected = np.vstack([force[None, :], accel * sens[1:, None]])
        resid = seg - expected
        noise = piece.settings.noise_v_rms
        assert np.all(np.std(resid, axis=1) < 1.3 * noise)
        assert np.all(np.abs(np.mean(resid, axis=1)) < 0.2 * noise)
        assert np.max(seg[0]) / sens[0] == pytest.approx(40.0, rel=0.02)
    finally:
        host.close()
        piece.close()


# The demo panel with 10 % damping: a tap dies away below 1e-11 within RECORD samples, so
# the record's spectrum is the Fourier transform of the whole response.
HEAVILY_DAMPED = dataclasses.replace(demo_panel(), damping_ratio=np.full(demo_panel().n_modes, 0.1))
RECORD = 32_768  # 0.64 s at 51.2 kHz
DITHER_V = 1e-6  # rms, about 1.7 LSB: the 24-bit rounding error is then white (see below)


def test_filtered_stream_is_the_exact_response_through_the_filter() -> None:
    """With the anti-alias filter (the default) the stream is G(f) times the exact spectrum.

    Reference: the Fourier transforms of the half-sine force (closed form, checked in
    test_simulated_physics) and of the response, accelerance × force (Ewins, Modal Testing,
    2nd ed., 2000, ch. 2, from memory; the model's closed form), times the filter's
    documented zero-phase response G(f), itself checked against scipy.signal.freqz in
    test_simulated_physics. Sampling at rate turns a spectrum X(f) into
    rate · Σ_m X(f - m·rate) (Poisson summation; Oppenheim & Schafer, Discrete-Time
    Signal Processing, 3rd ed., 2010, §4.2, from memory); the filter keeps every image
    m ≠ 0 at least 99.9 dB down (those of its 64-times-finer grid, near multiples of
    64·rate, lie about 125 dB below the pulse's low-frequency level for this tip), so the
    DFT of the record is rate · G(f) · X(f) · exp(-2πi f (t0 - t_first)), up to the noise.

    Noise: white Gaussian noise of σ_n plus 24-bit rounding (uniform, LSB²/12) puts on every
    DFT line a complex error of mean square n·σ² (σ² = σ_n² + LSB²/12, n samples); 6·σ·√n
    is exceeded with probability exp(-36) per line. Rounding is white only with enough
    noise ahead of it (at least about 1 LSB rms of Gaussian dither; Widrow & Kollár,
    Quantization Noise, 2008, from memory), hence DITHER_V: with less, the rounding error
    of the slowly decaying first mode is correlated with it and shows near 66 Hz.

    Checked: (1) every line from 0 to rate/2 within that bound of rate·G·X, phase included,
    so the filter's group delay is compensated (sample k stands for time k/rate);
    (2) below 0.4·rate the stream agrees with the exact spectrum itself to within the
    passband ripple (±0.0001 dB) plus the noise bound; (3) the streamed force pulse's
    centroid is t0 + T/2 (a zero-phase filter with DC gain 1 keeps a pulse's area and
    centroid) to within 6 standard deviations of its noise, far below one fine-grid step;
    (4) the check can fail: the same signals point-sampled at k/rate miss (1) by more than
    ten times the bound, by aliasing.
    """
    filt = converter_filter()
    settings = InstrumentSettings(noise_v_rms=DITHER_V)
    inst = open_simulated("pty", model=HEAVILY_DAMPED, settings=settings)
    host = Host(inst.url)
    try:
        host.send(Opcode.START)
        host.wait(lambda: host.samples() >= 1024)
        rec = inst.tap("B3", force_n=20.0, width_s=0.0002)  # the hardest tip allowed
        assert rec is not None
        pre = 100  # samples before the pulse: more than the filter's reach of 33 samples
        host.wait(lambda: host.blocks()[-1].end_index > rec.first_index - pre + RECORD)
        first, volts = stitched(host.blocks())
        lo = rec.first_index - pre - first
        seg = volts[:, lo : lo + RECORD]
        rate = inst.rate_hz
        t_first = (first + lo) / rate
    finally:
        host.close()
        inst.close()
    sens = np.asarray(inst.sensitivities())
    freq = np.fft.rfftfreq(RECORD, 1.0 / rate)
    force = half_sine_spectrum(freq, rec.width_s, rec.peak_n)
    points = list(HEAVILY_DAMPED.sensors.values())
    spectra = [force] + [accelerance(HEAVILY_DAMPED, "B3", p, freq) * force for p in points]
    delay = np.exp(-2j * np.pi * freq * (rec.t0_s - t_first))
    exact = rate * np.array(spectra) * delay * sens[:, None]  # volts per DFT line
    gain = filt.frequency_response(freq, rate)
    measured = np.fft.rfft(seg, axis=-1)
    lsb = settings.full_scale_v / 2 ** (settings.adc_bits - 1)
    bound = 6.0 * math.sqrt(RECORD * (DITHER_V**2 + lsb**2 / 12.0))

    # (1) through the filter's response, on every line up to Nyquist
    assert np.abs(measured - gain * exact).max() <= bound
    # (2) the passband: the exact spectrum to within the ripple
    passband = freq <= 0.4 * rate
    ripple = 10.0 ** (0.0001 / 20.0) - 1.0
    miss = np.abs(measured - exact)[:, passband]
    assert np.all(miss <= ripple * np.abs(exact[:, passband]) + bound)
    # (3) timing in the time domain: the force centroid
    t = t_first + np.arange(RECORD) / rate
    # The filtered pulse is exactly 0 farther than the filter's reach from the pulse.
    near = np.abs(t - (rec.t0_s + 0.5 * rec.width_s)) <= 0.5 * rec.width_s + filt.reach_s(rate)
    f_n = seg[0, near] / sens[0]
    area = f_n.sum()
    centroid = (t[near] * f_n).sum() / area
    expected = rec.t0_s + 0.5 * rec.width_s
    sigma_f = math.sqrt(DITHER_V**2 + lsb**2 / 12.0) / sens[0]
    sigma_c = sigma_f * math.sqrt(np.sum((t[near] - expected) ** 2)) / area
    fine_step = 1.0 / (filt.oversample * rate)
    assert 6.0 * sigma_c < 0.5 * fine_step
    assert abs(centroid - expected) <= 6.0 * sigma_c
    # (4) point samples of the same signals fail (1) by far
    plain = np.vstack([
        half_sine(t - rec.t0_s, rec.width_s, rec.peak_n),
        modal_acceleration(HEAVILY_DAMPED, "B3", t, rec.t0_s, rec.width_s, rec.peak_n),
    ]) * sens[:, None]  # fmt: skip
    assert np.abs(np.fft.rfft(plain, axis=-1) - gain * exact).max() > 10.0 * bound


def test_double_hit_and_overload_faults(piece: SimulatedPiece) -> None:
    host = Host(piece.url)
    try:
        host.send(Opcode.START)
        host.wait(lambda: host.samples() >= 1024)
        rec = piece.tap("A2", double_hit=True)
        assert rec is not None and rec.double_hit
        host.wait(lambda: host.blocks()[-1].end_index > rec.first_index + 2048)
        first, volts = stitched(host.blocks())
        f = volts[0, rec.first_index - first - 10 : rec.first_index - first + 2048]
        above = f > 0.1 * f.max()
        pulses = int(np.count_nonzero(np.diff(above.astype(int)) == 1)) + int(above[0])
        assert pulses == 2
        over = piece.tap("A2", overload=True)
        assert over is not None
        host.wait(
            lambda: any(
                isinstance(e, StatusReceived) and e.status.overload_mask for e in host.events
            )
        )
        full = piece.settings.full_scale_v
        host.wait(lambda: host.blocks()[-1].end_index > over.first_index + 512)
        first, volts = stitched(host.blocks())
        seg = volts[:, over.first_index - first : over.first_index - first + 512]
        assert np.max(np.abs(seg)) >= full * (1 - 2**-22)
    finally:
        host.close()


def test_dropped_and_corrupted_frames_are_seen_as_such(piece: SimulatedPiece) -> None:
    host = Host(piece.url)
    try:
        host.send(Opcode.START)
        host.wait(lambda: host.samples() >= 1024)
        piece.faults.drop_frame_probability = 0.05
        piece.faults.corrupt_probability = 0.05
        host.wait(lambda: piece.counters.frames_dropped >= 3
                  and piece.counters.frames_corrupted >= 3)
        piece.faults.drop_frame_probability = 0.0
        piece.faults.corrupt_probability = 0.0
        sent = piece.counters.frames_sent
        host.wait(lambda: host.decoder.stats.frames_ok > sent + 20)
        st = host.decoder.stats
        lost = piece.counters.frames_dropped * 256
        assert st.samples_lost >= lost
        assert st.crc_errors + st.resyncs >= 1
        assert sum(e.count for e in host.events if isinstance(e, Gap)) == st.samples_lost
    finally:
        host.close()


def test_stall_then_resume_shows_a_gap(piece: SimulatedPiece) -> None:
    host = Host(piece.url)
    try:
        host.send(Opcode.START)
        host.wait(lambda: host.samples() >= 1024)
        piece.faults.stalled = True
        stalled_at = host.samples()
        deadline = time.monotonic() + 0.3
        while time.monotonic() < deadline:
            host.pump()
        piece.faults.stalled = False
        host.wait(lambda: any(isinstance(e, Gap) for e in host.events))
        gap = next(e for e in host.events if isinstance(e, Gap))
        assert gap.count >= 0.2 * piece.rate_hz
        assert stalled_at <= host.samples()
    finally:
        host.close()


def test_unplug_replug_at_stable_name(tmp_path: Path) -> None:
    """The pty disappears on unplug (the host's read fails) and returns at the same link name."""
    link = tmp_path / "ttyTAPRIG0"
    inst = open_simulated("pty", link=str(link))
    try:
        assert inst.url == str(link) and link.is_symlink()
        host = Host(inst.url)
        host.send(Opcode.START)
        host.wait(lambda: host.samples() >= 512)
        inst.unplug()
        with pytest.raises(serial.SerialException):
            deadline = time.monotonic() + 5
            while time.monotonic() < deadline:
                host.port.read(4096)
        host.close()
        inst.replug()
        deadline = time.monotonic() + 5
        while not link.exists():
            assert time.monotonic() < deadline
            time.sleep(0.01)
        host = Host(inst.url)
        host.send(Opcode.START)
        host.wait(lambda: host.samples() >= 512)
        assert host.blocks()[0].first_index == 0  # power was lost: a fresh stream
        host.close()
    finally:
        inst.close()


def test_tcp_transport_like_a_wifi_board() -> None:
    inst = SimulatedPiece(port=TcpPort()).start()
    try:
        assert inst.url.startswith("socket://127.0.0.1:")
        host = Host(inst.url)
        host.send(Opcode.START)
        host.wait(lambda: host.samples() >= 2048)
        assert host.decoder.stats.crc_errors == 0
        host.close()
        inst.unplug()
        with pytest.raises(serial.SerialException):
            serial.serial_for_url(inst.url, timeout=0.1)
        inst.replug()
        host = Host(inst.url)
        host.send(Opcode.START)
        host.wait(lambda: host.samples() >= 512)
        host.close()
    finally:
        inst.close()


def test_text_output_over_pty() -> None:
    inst = open_simulated("pty", settings=InstrumentSettings(output="text", rate_hz=2000.0))
    try:
        host = Host(inst.url, fmt="text")
        host.wait(lambda: host.decoder.info is not None and host.samples() > 500)
        assert host.decoder.info is not None and host.decoder.info.rate_hz == 2000.0
        assert host.decoder.stats.malformed_lines == 0
        host.close()
    finally:
        inst.close()


def test_control_interface(piece: SimulatedPiece) -> None:
    server = ControlServer(piece).start()
    host = Host(piece.url)
    try:
        host.send(Opcode.START)
        host.wait(lambda: host.samples() >= 512)
        with socket.create_connection(("127.0.0.1", server.port), timeout=5) as s:
            f = s.makefile("rwb")

            def ask(obj: object) -> dict[str, object]:
                f.write(json.dumps(obj).encode() + b"\n")
                f.flush()
                reply: dict[str, object] = json.loads(f.readline())
                return reply

            assert ask({"op": "tap", "point": "B3", "force_n": 12.5})["ok"] is True
            off = ask({"op": "tap", "point": "Z9"})
            assert off["ok"] is False and "'Z9' is not on the simulated piece" in str(off["error"])
            for huge in (10**400, -(10**400), 1e308 * 10):  # JSON keeps big ints exact
                reply = ask({"op": "tap", "point": "B3", "force_n": huge})
                assert reply["ok"] is False and "force_n" in str(reply["error"]), reply
            assert ask({"op": "fault", "name": "stalled", "value": "yes"})["ok"] is False
            assert ask({"op": "fault", "name": "nope", "value": 1})["ok"] is False
            assert ask({"op": "frobnicate"})["ok"] is False
            f.write(b"{not json\n")
            f.flush()
            assert json.loads(f.readline())["ok"] is False
            state = ask({"op": "state"})
            assert state["taps"] == 1 and state["streaming"] is True
        assert piece.counters.taps[0].peak_n == 12.5
        assert not piece.faults.stalled
    finally:
        host.close()
        server.close()


def test_decoder_sees_tap_time_exactly() -> None:
    """Sample k is at k / rate (PROTOCOL.md §3): the force onset sits at ceil(t0 · rate).

    Point samples (no anti-alias filter), so the first sample after t0 is the first one
    above zero; with the filter the timing is checked by
    test_filtered_stream_is_the_exact_response_through_the_filter.
    """
    inst = open_simulated("pty", settings=InstrumentSettings(noise_v_rms=1e-7, anti_alias=False))
    host = Host(inst.url)
    try:
        host.send(Opcode.START)
        host.wait(lambda: host.samples() >= 512)
        rec = inst.tap("D5", force_n=20.0, width_s=0.0005)
        assert rec is not None
        host.wait(lambda: host.blocks()[-1].end_index > rec.first_index + 64)
        first, volts = stitched(host.blocks())
        onset = int(np.argmax(volts[0] > 1e-4)) + first
        assert onset == math.ceil(rec.t0_s * inst.rate_hz)
    finally:
        host.close()
        inst.close()


def test_binary_decoder_type_is_used() -> None:
    assert isinstance(make_decoder("binary"), BinaryDecoder)


def test_a_tap_can_pull_the_cable_at_a_given_sample(tmp_path: Path) -> None:
    """`unplug_after_s`: the device loses power at that sample of its own clock, so no sample
    after it is ever sent, however late the host reads (the cut-record fault, made certain).
    What was in flight when the cable went may be lost too (a pty hangs up), never more."""
    link = tmp_path / "ttyCUT"
    with open_simulated("pty", link=str(link)) as inst:
        port = serial.serial_for_url(str(link), timeout=0.05)
        dec = BinaryDecoder()
        last = -1

        def read() -> None:
            nonlocal last
            for ev in dec.feed(port.read(65536)):
                if isinstance(ev, SampleBlock):
                    last = ev.first_index + ev.count - 1

        port.write(FrameEncoder().command(Command(Opcode.START, 1)))
        deadline = time.monotonic() + 10
        while last < 0:
            assert time.monotonic() < deadline
            read()
        record = inst.tap("A1", unplug_after_s=0.02)
        assert record is not None
        cut = record.first_index + math.ceil(0.02 * inst.rate_hz)
        try:
            while time.monotonic() < deadline:
                read()
        except serial.SerialException:
            pass  # the cable is out: the host's read fails
        finally:
            port.close()
        while inst.streaming:  # powered off just after the port went away
            assert time.monotonic() < deadline, "the device never stopped"
            time.sleep(0.005)
        assert 0 <= last < cut + inst.settings.frame_samples  # nothing past the cut's chunk
