"""A hit keeps the device's integer codes and their scale: captured from the simulated test
piece over a real pty (int24 and int16 converters, a float32 device, a text board), the
stored codes are the codes the piece sent, and codes × scale is the daemon's float64 SI record.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pytest

from taprig.daemon.config import load_config
from taprig.daemon.lifespan import RunningRig, start_rig
from taprig.daemon.records import PointSet, RovingMode
from taprig.firmware_protocol import SampleFormat
from taprig.firmware_protocol.samples import codes_to_volts
from taprig.firmware_protocol.simpiece.instrument import InstrumentSettings
from taprig.schema.pointset import F4, F8, I2, I4

from .test_rig import DAMPED, Events, grid_of, tap_and_wait, wait_info

BINARY = ["capture.block=4096", "capture.averages=2", "store.min_free_mb=1"]
TEXT = ["device.url=simulated:text", "device.format=text", "capture.block=1024",
        "capture.averages=2", "store.min_free_mb=1"]  # fmt: skip

# IEEE 754-2008 binary32 has a 24-bit significand: a value rounded to float32 is within a
# relative 2⁻²⁴ of the exact one. "To the last bit of float32 or better" is this bound.
F32_HALF_ULP = 2.0**-24
# IEEE 754-2008 binary64 (53-bit significand, unit roundoff 2⁻⁵³): code × volts per code ×
# SI per volt (two roundings) against code × (volts per code × SI per volt) (two roundings)
# differ by at most about 4 units of roundoff.
F64_BOUND = 4 * 2.0**-53


def _rig(tmp_path: Path, settings: InstrumentSettings | None, extra: list[str]) -> RunningRig:
    cfg = load_config(None, [f"store.data_dir={tmp_path}", *extra])
    return start_rig(cfg, settings, model=DAMPED)


def measured(r: RunningRig) -> PointSet:
    """One point (B3) measured with two taps while the piece keeps what it sends."""
    piece = r.instrument
    assert piece is not None
    piece.keep_sent()
    ev = Events(r)
    wait_info(r)
    r.rig.create_test("counts", grid_of(piece, ["B3"]), RovingMode.HAMMER, reference="B3",
                      sensor_points=piece.model.sensor_places())  # fmt: skip
    r.rig.select_test("counts")
    r.rig.arm()
    for force in (25.0, 30.0):
        hit = tap_and_wait(r, ev, "B3", force_n=force)
        assert hit.data["accepted"], hit.data["rejections"]
    ev.next("completed")
    (summary,) = r.store.list_point_sets(test="counts")
    return r.store.get_point_set(summary.id, with_hits=True)


def sent_and_si(r: RunningRig, trigger_index: int) -> tuple[np.ndarray, np.ndarray]:
    """(samples the piece sent, (channels, block) in the configuration's channel order; the
    daemon's float64 SI record of them, computed as the decoder and acquirer compute it)."""
    piece, info = r.instrument, r.rig.view().info
    assert piece is not None and info is not None
    cap = r.config.capture
    sent = piece.sent(trigger_index - cap.pretrigger, cap.block)
    assert sent is not None, "the piece did not keep the hit's samples"
    if info.sample_format is SampleFormat.FLOAT32:  # volts packed as float32 on the link
        sent = sent.astype(F4)
    channels = sorted(r.config.channels, key=lambda c: c.index)
    rows = [c.index for c in channels]
    si_per_volt = np.array([c.si_per_volt for c in channels])[:, None]
    vpc = np.ones(info.channel_count) if info.sample_format is SampleFormat.FLOAT32 else (
        np.asarray(info.volts_per_code()))  # fmt: skip
    volts = codes_to_volts(sent, vpc)
    return sent.T[rows], volts[rows] * si_per_volt


@pytest.mark.parametrize(
    ("settings", "dtype"),
    [(None, I4), (InstrumentSettings(sample_format=SampleFormat.INT16, adc_bits=16), I2)],
    ids=["int24", "int16"],
)
def test_hits_keep_the_codes_the_device_sent(
    tmp_path: Path, settings: InstrumentSettings | None, dtype: np.dtype[np.signedinteger]
) -> None:
    """The stored record is the piece's codes exactly (int32 for its 24-bit converter, int16
    for a 16-bit one), and codes × scale is the daemon's float64 SI record within float64
    rounding (IEEE 754-2008 binary64), far inside float32's last bit (binary32, 2⁻²⁴)."""
    r = _rig(tmp_path, settings, BINARY)
    try:
        ps = measured(r)
        info = r.rig.view().info
        assert info is not None
        channels = sorted(r.config.channels, key=lambda c: c.index)
        want_scale = np.array(
            [info.volts_per_code()[c.index] * c.si_per_volt for c in channels]
        )  # SI units per code: volts per code × (N or m/s²) per volt
        for hit in ps.hits:
            assert hit.data is not None and hit.scale is not None
            codes, si = sent_and_si(r, hit.trigger_index)
            assert hit.data.dtype == dtype and np.array_equal(hit.data, codes)
            assert hit.scale.dtype == F8 and np.array_equal(hit.scale, want_scale)
            got = hit.si()
            assert got is not None and got.dtype == np.float64
            err = np.abs(got - si)
            assert np.all(err <= F64_BOUND * np.abs(si)), float(np.max(err / np.abs(si).max()))
            assert np.all(err <= F32_HALF_ULP * np.abs(si))
            assert np.abs(codes).max() > 100  # a real tap, not a record of zeros
    finally:
        r.close()


@pytest.mark.parametrize(
    ("settings", "extra"),
    [(InstrumentSettings(sample_format=SampleFormat.FLOAT32), BINARY), (None, TEXT)],
    ids=["float32-device", "text-board"],
)
def test_devices_without_codes_keep_float32_si_values_with_a_scale_of_one(
    tmp_path: Path, settings: InstrumentSettings | None, extra: list[str]
) -> None:
    """A float32 device and a text board send volts, no codes: the record is the SI values
    rounded once to float32 (round to nearest, IEEE 754-2008 §4.3.1) and the scale 1.0."""
    r = _rig(tmp_path, settings, extra)
    try:
        ps = measured(r)
        for hit in ps.hits:
            assert hit.data is not None and hit.scale is not None
            assert hit.data.dtype == F4 and hit.scale.tolist() == [1.0] * hit.data.shape[0]
            got = hit.si()
            assert got is not None and np.array_equal(got, hit.data.astype(np.float64))
            if r.config.device.format == "text":
                # A text board's sample indexes count lines from the link's opening, not the
                # piece's own clock: its hits cannot be matched to what it sent by index.
                assert float(np.abs(hit.data[0]).max()) > 10.0  # a tap's force, in N
                continue
            _volts, si = sent_and_si(r, hit.trigger_index)
            assert np.array_equal(hit.data, si.astype(F4))
    finally:
        r.close()


@pytest.fixture
def int16_point_set(tmp_path: Path) -> Iterator[PointSet]:
    r = _rig(tmp_path, InstrumentSettings(sample_format=SampleFormat.INT16, adc_bits=16), BINARY)
    try:
        yield measured(r)
    finally:
        r.close()


def test_an_int16_record_is_half_the_float32_one(int16_point_set: PointSet) -> None:
    """2 bytes a sample instead of 4 (int16 against IEEE 754 binary32), 8 bytes a channel
    for the scale."""
    for hit in int16_point_set.hits:
        assert hit.data is not None and hit.scale is not None
        as_float32 = dataclasses.replace(hit, data=hit.data.astype(F4)).data
        assert as_float32 is not None
        assert hit.data.nbytes * 2 == as_float32.nbytes
        assert hit.data.nbytes + hit.scale.nbytes <= as_float32.nbytes / 2 + 8 * hit.data.shape[0]


def test_the_session_keeps_codes_and_falls_back_to_si_values_for_impossible_ones() -> None:
    """A record made of codes × scale is kept as those codes; one no 32-bit code can give
    (two's-complement range, common practice) is kept as float32 SI values, scale 1.0."""
    from .test_session import hit, session

    record, verdict = hit(100.0)
    per_count = np.array([100.0 / 2**15, 300.0 / 2**15])  # N and m/s² per code
    codes = np.rint(record.data / per_count[:, None])
    exact = dataclasses.replace(record, data=codes * per_count[:, None], per_count=per_count,
                                code_bits=16)  # fmt: skip
    ps = session(averages=1).on_hit(exact, verdict).completed
    assert ps is not None and ps.hits[0].data is not None and ps.hits[0].scale is not None
    assert ps.hits[0].data.dtype == I2 and np.array_equal(ps.hits[0].data, codes)
    assert np.array_equal(ps.hits[0].scale, per_count)
    huge = dataclasses.replace(exact, per_count=per_count * 1e-9)
    ps = session(averages=1).on_hit(huge, verdict).completed
    assert ps is not None and ps.hits[0].data is not None and ps.hits[0].scale is not None
    assert ps.hits[0].data.dtype == F4 and ps.hits[0].scale.tolist() == [1.0, 1.0]
