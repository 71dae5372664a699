"""The C reference of the device link (firmware_protocol/c) and the Python package agree.

Device -> host: the golden files that c/vectors_main.c writes are byte for byte
the committed firmware_protocol/vectors/ files and what FrameEncoder builds
from vectors/manifest.json, and BinaryDecoder reads back the manifest's values.
Host -> device: the C COMMAND parser, fed the Python-encoded streams whole, in
chunks or byte by byte, finds the commands and counts the errors the manifest
and the Python decoder find.

Outside references (each check names its own in its docstring):
- Greg Cook, "Catalogue of parametrised CRC algorithms" (CRC RevEng), entries
  CRC-16/XMODEM (check 0x31C3) and CRC-32/ISO-HDLC (check 0xCBF43926).
- Python standard library: zlib.crc32 (the CRC-32 of P. Deutsch, RFC 1952 "GZIP
  file format specification", 1996, section 8), binascii.crc_hqx (CRC-CCITT as
  XMODEM uses it, started from 0), struct and int.to_bytes for little-endian
  two's complement and IEEE 754 binary32 packing.
- IEEE Std 754-2008, section 3.4, binary32 encodings of infinities, signed zero
  and subnormals (bit patterns from memory, packed here with struct).

The C sources are compiled with gcc; without gcc the tests are skipped unless
the CI variable is set, when they fail.
"""

from __future__ import annotations

import binascii
import os
import re
import shutil
import struct
import subprocess
import zlib
from collections.abc import Callable, Iterator
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Any

import numpy as np
import numpy.typing as npt
import pytest

from taprig.firmware_protocol import (
    Ack,
    AckReceived,
    AckResult,
    BadCommand,
    BinaryDecoder,
    ChannelInfo,
    Command,
    CommandReceived,
    CrcError,
    DeviceInfo,
    DeviceInfoReceived,
    Event,
    FrameEncoder,
    FramesLost,
    Opcode,
    SampleBlock,
    SampleFormat,
    Status,
    StatusReceived,
)
from taprig.firmware_protocol import frames as fr

from .make_command_vectors import build_all, command_frame, load_manifest

ROOT = Path(__file__).resolve().parents[2]
C_DIR = ROOT / "firmware_protocol" / "c"
VECTORS = ROOT / "firmware_protocol" / "vectors"
SOURCES = (C_DIR / "taprig_link.c", C_DIR / "vectors_main.c")
TIMEOUT_S = 60.0

STRICT = ("-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic")
EXTRA_WARNINGS = (
    "-Wconversion",
    "-Wshadow",
    "-Wsign-conversion",
    "-Wstrict-prototypes",
    "-Wmissing-prototypes",
    "-Wcast-qual",
    "-Wundef",
    "-Wformat=2",
)
BUILDS: dict[str, tuple[str, ...]] = {
    "strict": (*STRICT, "-O2"),
    "extra_warnings": (*STRICT, *EXTRA_WARNINGS, "-O2"),
    "bitwise_crc": (*STRICT, "-O2", "-DTRL_CRC_BITWISE"),
    "sanitized": (
        *STRICT,
        "-O1",
        "-g",
        "-fsanitize=address,undefined",
        "-fno-sanitize-recover=all",
    ),
}

MANIFEST = load_manifest()
DEVICE = MANIFEST["device_to_host"]
COMMAND_FILES = tuple(MANIFEST["host_to_device"])
FORMATS = {f.name.lower(): f for f in SampleFormat}
FRAME_TYPES = {t.name: t for t in fr.FrameType}


# --- building and running the C program ----------------------------------------


@pytest.fixture(scope="session")
def c_programs(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """vectors_main built once per flag set in BUILDS (in parallel), by name."""
    gcc = shutil.which("gcc")
    if gcc is None:
        if os.environ.get("CI"):
            pytest.fail("gcc is not installed: CI must have it to check the C reference")
        pytest.skip("gcc is not installed")
    out = tmp_path_factory.mktemp("c_build")

    def build(name: str) -> tuple[str, Path, subprocess.CompletedProcess[str]]:
        exe = out / f"vectors_main_{name}"
        cmd = [gcc, *BUILDS[name], *map(str, SOURCES), "-o", str(exe)]
        proc = subprocess.run(cmd, capture_output=True, text=True, timeout=TIMEOUT_S, check=False)
        return name, exe, proc

    with ThreadPoolExecutor(max_workers=2) as pool:
        results = list(pool.map(build, BUILDS))
    failed = [f"{name}: {proc.stderr}" for name, _exe, proc in results if proc.returncode != 0]
    assert not failed, "gcc failed:\n" + "\n".join(failed)
    warned = [f"{name}: {proc.stderr}" for name, _exe, proc in results if proc.stderr.strip()]
    assert not warned, "gcc printed diagnostics:\n" + "\n".join(warned)
    return {name: exe for name, exe, _proc in results}


@pytest.fixture(scope="session")
def c_main(c_programs: dict[str, Path]) -> Path:
    """The build with the required flags, -std=c99 -Wall -Wextra -Werror -pedantic (and -O2)."""
    return c_programs["strict"]


def run(exe: Path, *args: str | Path) -> str:
    """stdout of the program; it must exit 0 and print nothing on stderr."""
    proc = subprocess.run(
        [str(exe), *map(str, args)], capture_output=True, text=True, timeout=TIMEOUT_S, check=False
    )
    assert proc.returncode == 0, f"{exe.name} {args}: exit {proc.returncode}\n{proc.stderr}"
    assert proc.stderr == "", proc.stderr
    return proc.stdout


def write_vectors(exe: Path, out: Path) -> dict[str, bytes]:
    out.mkdir(parents=True, exist_ok=True)
    assert run(exe, out) == ""
    return {p.name: p.read_bytes() for p in sorted(out.iterdir())}


@pytest.fixture(scope="session")
def c_vectors(c_main: Path, tmp_path_factory: pytest.TempPathFactory) -> dict[str, bytes]:
    """File name -> bytes of the device vectors the C program writes."""
    return write_vectors(c_main, tmp_path_factory.mktemp("vectors"))


def parse_lines(exe: Path, stream: Path, chunk: int = 0) -> list[str]:
    return run(exe, "--parse", stream, "--chunk", str(chunk)).splitlines()


# --- the manifest, through the Python package ----------------------------------------


def device_info(spec: dict[str, Any]) -> DeviceInfo:
    """A DeviceInfo from the manifest's "info" object."""
    return DeviceInfo(
        protocol_version=int(spec["protocol_version"]),
        sample_format=FORMATS[spec["sample_format"]],
        rate_milli_hz=int(spec["rate_milli_hz"]),
        device_id=str(spec["device_id"]),
        firmware=str(spec["firmware"]),
        channels=tuple(
            ChannelInfo(float(c["full_scale_v"]), int(c["adc_bits"])) for c in spec["channels"]
        ),
    )


def status_of(spec: dict[str, Any]) -> Status:
    return Status(
        sample_index=int(spec["sample_index"]),
        overload_mask=int(spec["overload_mask"]),
        streaming=int(spec["state"]) == 1,
        overruns=int(spec["overruns"]),
    )


def ack_of(spec: dict[str, Any]) -> Ack:
    return Ack(
        int(spec["opcode"]), AckResult(int(spec["result"])), int(spec["tag"]), int(spec["value"])
    )


def python_frame(entry: dict[str, Any]) -> bytes:
    """The frame FrameEncoder builds from one device_to_host manifest entry."""
    enc = FrameEncoder(first_seq=int(entry["seq"]))
    kind = entry["frame"]
    if kind == "INFO":
        return enc.info(device_info(entry["info"]))
    if kind == "DATA":
        fmt = FORMATS[entry["sample_format"]]
        return enc.data(int(entry["first_sample"]), entry["samples"], fmt)
    if kind == "STATUS":
        return enc.status(status_of(entry["status"]))
    assert kind == "ACK", kind
    return enc.ack(ack_of(entry["ack"]))


def expected_lines(section: dict[str, Any]) -> list[str]:
    """What vectors_main --parse must print for a host_to_device manifest section."""
    lines = []
    for ev in section["expected"]["events"]:
        if ev["kind"] == "command":
            lines.append(
                f"seq={ev['seq']} opcode={ev['opcode']} tag={ev['tag']} arg={ev['argument']}"
            )
        else:
            lines.append(f"refused opcode={ev['opcode']} tag={ev['tag']} result={ev['result']}")
    exp = section["expected"]
    lines.append(
        f"header_crc_errors={exp['header_crc_errors']} "
        f"frame_crc_errors={exp['frame_crc_errors']} skipped={exp['skipped']}"
    )
    return lines


def python_commands(events: list[Event]) -> list[tuple[str, int, int, int]]:
    """(kind, opcode, tag, argument or ACK result) of the decoder's command events."""
    out = []
    for e in events:
        if isinstance(e, CommandReceived):
            c = e.command
            out.append(("command", int(c.opcode), c.tag, c.argument))
        elif isinstance(e, BadCommand):
            out.append(("refused", e.opcode, e.tag, e.result))
    return out


def line_commands(lines: list[str]) -> list[tuple[str, int, int, int]]:
    """The same tuples from vectors_main --parse lines (seq dropped)."""
    out = []
    for line in lines:
        f = _fields(line.removeprefix("refused "))
        if line.startswith("refused"):
            out.append(("refused", int(f["opcode"]), int(f["tag"]), int(f["result"])))
        elif "opcode" in f:
            out.append(("command", int(f["opcode"]), int(f["tag"]), int(f["arg"])))
    return out


def _fields(line: str) -> dict[str, str]:
    """'a=1 b=2' -> {'a': '1', 'b': '2'}."""
    return dict(kv.split("=", 1) for kv in line.split())


def counters(lines: list[str]) -> dict[str, int]:
    return {k: int(v) for k, v in _fields(lines[-1]).items()}


# --- CRCs -----------------------------------------------------------------------------


def test_crc_check_values(c_main: Path) -> None:
    """CRC-16/XMODEM("123456789") = 0x31C3 and CRC-32/ISO-HDLC("123456789") = 0xCBF43926.

    Source: Greg Cook, "Catalogue of parametrised CRC algorithms" (CRC RevEng), the
    check values of CRC-16/XMODEM and CRC-32/ISO-HDLC; the same values from the
    Python standard library's binascii.crc_hqx and zlib.crc32. The incremental
    forms (init/update/final, split input) must give the same.
    """
    lines = run(c_main, "--selftest").splitlines()
    out = _fields(" ".join(line for line in lines if not line.startswith("case ")))
    catalogue = {"crc16": 0x31C3, "crc32": 0xCBF43926}
    assert binascii.crc_hqx(b"123456789", 0) == catalogue["crc16"]
    assert zlib.crc32(b"123456789") == catalogue["crc32"]
    assert int(out["crc16_xmodem_check"], 16) == catalogue["crc16"]
    assert int(out["crc16_incremental_check"], 16) == catalogue["crc16"]
    assert int(out["crc32_iso_hdlc_check"], 16) == catalogue["crc32"]
    assert int(out["crc32_incremental_check"], 16) == catalogue["crc32"]


@pytest.mark.parametrize("build", ["strict", "bitwise_crc"])
def test_crc_of_random_data(c_programs: dict[str, Path], build: str, tmp_path: Path) -> None:
    """Nibble-table and bitwise CRCs of 20 000 random bytes, one-shot and in pieces.

    Source: Python standard library zlib.crc32 (RFC 1952, 1996, section 8) and
    binascii.crc_hqx started from 0 (CRC-16/XMODEM).
    """
    data = np.random.default_rng(7).integers(0, 256, 20_000, dtype=np.uint8).tobytes()
    path = tmp_path / "random.bin"
    path.write_bytes(data)
    got = {
        k: int(v, 16)
        for k, v in (kv.split("=") for kv in run(c_programs[build], "--crc", path).split())
    }
    assert got == {
        "crc16_xmodem": binascii.crc_hqx(data, 0),
        "crc16_pieces": binascii.crc_hqx(data, 0),
        "crc32_iso_hdlc": zlib.crc32(data),
        "crc32_pieces": zlib.crc32(data),
    }


# --- device -> host vectors ---------------------------------------------------------


def test_c_writes_the_committed_vectors(c_vectors: dict[str, bytes]) -> None:
    """Each file vectors_main writes equals the committed file and FrameEncoder's frame.

    The expected values are the manifest's (written from the vector list, not
    from either program); two independent encoders agreeing with it is the check.
    """
    assert set(c_vectors) == {e["file"] for e in DEVICE}
    for entry in DEVICE:
        name = entry["file"]
        committed = (VECTORS / name).read_bytes()
        assert c_vectors[name] == committed, f"{name}: C output differs from the committed file"
        assert python_frame(entry) == committed, f"{name}: Python encoder differs"


def _int_bytes(codes: npt.ArrayLike, size: int) -> bytes:
    return b"".join(int(k).to_bytes(size, "little", signed=True) for k in np.ravel(codes))


def test_vector_bytes_against_the_standard_library() -> None:
    """Envelope and sample bytes of each device vector, packed with the standard library.

    Sources: CRC-16/XMODEM = binascii.crc_hqx(., 0) and CRC-32/ISO-HDLC = zlib.crc32
    (Python standard library; catalogue by Greg Cook, CRC RevEng); little-endian two's
    complement from int.to_bytes and IEEE 754 binary32 from struct "<f" (IEEE Std
    754-2008, section 3.4); field offsets from PROTOCOL.md sections 1 and 3.
    """
    for entry in DEVICE:
        raw = (VECTORS / entry["file"]).read_bytes()
        magic, version, ftype, seq, length, hcheck = struct.unpack_from("<2sBBHHH", raw)
        assert (magic, version, ftype, seq) == (
            b"\xe7\x19",
            1,
            FRAME_TYPES[entry["frame"]],
            entry["seq"],
        )
        assert length == len(raw) - 14
        assert hcheck == binascii.crc_hqx(raw[:8], 0)
        assert struct.unpack_from("<I", raw, len(raw) - 4)[0] == zlib.crc32(raw[:-4])
        payload = raw[10:-4]
        if entry["frame"] != "DATA":
            continue
        fmt = entry["sample_format"]
        samples = entry["samples"]
        head = struct.pack(
            "<QBBH", entry["first_sample"], entry["channels"], FORMATS[fmt], len(samples)
        )
        assert payload[:12] == head
        if fmt == "float32":
            body = struct.pack(f"<{np.size(samples)}f", *np.ravel(samples))
        else:
            body = _int_bytes(samples, {"int16": 2, "int24": 3, "int32": 4}[fmt])
        assert payload[12:] == body


def _decode_info_frame(entry: dict[str, Any]) -> bytes:
    """An INFO frame describing a DATA vector's channels, sent just before it."""
    spec = entry["decode_info"]
    if "vector" in spec:
        return (VECTORS / str(spec["vector"])).read_bytes()
    info = DeviceInfo(
        protocol_version=1,
        sample_format=FORMATS[entry["sample_format"]],
        rate_milli_hz=int(spec["rate_milli_hz"]),
        device_id="DECODE",
        firmware="0",
        channels=tuple(
            ChannelInfo(float(fs), int(bits))
            for fs, bits in zip(spec["full_scale_v"], spec["adc_bits"], strict=True)
        ),
    )
    return FrameEncoder(first_seq=int(entry["seq"]) - 1).info(info)


def test_python_decoder_reads_the_manifest_values(c_vectors: dict[str, bytes]) -> None:
    """BinaryDecoder turns each vector into the manifest's values, exactly.

    Integer codes become volts = code x full_scale_v / 2^(adc_bits - 1) (PROTOCOL.md
    section 3; the usual scaling of a bipolar two's complement converter, common
    practice); float32 samples are volts already. Power-of-two scaling is exact in
    float64, so the comparison is exact. The INFO is the committed vector where it
    describes the DATA frame, else one built from the manifest's decode_info.
    """
    for entry in DEVICE:
        raw = c_vectors[entry["file"]]
        kind = entry["frame"]
        if kind == "DATA":
            prefix = _decode_info_frame(entry)
            dec = BinaryDecoder()
            events = dec.feed(prefix + raw)
            info = dec.info
            assert info is not None
            blocks = [e for e in events if isinstance(e, SampleBlock)]
            others = [e for e in events if not isinstance(e, SampleBlock | DeviceInfoReceived)]
            info_seq = struct.unpack_from("<H", prefix, 4)[0]
            lost = int(entry["seq"]) - info_seq - 1
            assert others == ([FramesLost(lost)] if lost else []), entry["file"]
            assert len(blocks) == 1
            block = blocks[0]
            assert block.first_index == entry["first_sample"]
            samples = np.asarray(entry["samples"])
            assert block.volts.dtype == np.float64
            assert block.volts.shape == (entry["channels"], samples.shape[0])
            if entry["sample_format"] == "float32":
                expected = samples.T.astype(np.float32).astype(np.float64)
            else:
                fs = np.array([c.full_scale_v for c in info.channels])
                bits = np.array([c.adc_bits for c in info.channels])
                expected = samples.T.astype(np.float64) * fs[:, None] / 2.0 ** (bits[:, None] - 1)
            np.testing.assert_array_equal(block.volts, expected)
            continue
        dec = BinaryDecoder()
        events = dec.feed(raw)
        if kind == "INFO":
            assert events == [DeviceInfoReceived(device_info(entry["info"]))]
        elif kind == "STATUS":
            assert events == [StatusReceived(status_of(entry["status"]))]
        else:
            assert events == [AckReceived(ack_of(entry["ack"]))]
        assert dec.stats.frames_ok == 1 and dec.stats.crc_errors == 0


# --- host -> device streams ---------------------------------------------------------


def test_command_vectors_are_built_from_the_manifest() -> None:
    """commands.bin and commands_noisy.bin are what the generator makes of the manifest.

    Also checks the noisy stream holds a magic only where the manifest put one
    (frame starts, the half frame, the false header in the garbage), so nothing
    else in it can pass for a frame.
    """
    built = build_all(MANIFEST)
    for name, data in built.items():
        assert (VECTORS / name).read_bytes() == data, f"{name}: rerun make_command_vectors.py"
    noisy = MANIFEST["host_to_device"]["commands_noisy.bin"]
    planned, pos = [], 0
    for piece in noisy["layout"]:
        if "garbage_hex" in piece:
            garbage = bytes.fromhex(piece["garbage_hex"])
            planned += [pos + m.start() for m in re.finditer(b"\xe7\x19", garbage)]
            pos += len(garbage)
        elif "half_frame" in piece:
            planned.append(pos)
            pos += int(piece["half_frame"]["keep"])
        else:
            planned.append(pos)
            frames = MANIFEST["host_to_device"]["commands.bin"]["frames"]
            pos += len(command_frame(frames[int(piece["frame"])]))
    stream = built["commands_noisy.bin"]
    assert pos == len(stream)
    assert [m.start() for m in re.finditer(b"\xe7\x19", stream)] == planned


@pytest.mark.parametrize("chunk", [0, 1, 7])
@pytest.mark.parametrize("name", COMMAND_FILES)
def test_c_parser_finds_the_manifest_commands(c_main: Path, name: str, chunk: int) -> None:
    """vectors_main --parse prints the manifest's commands and counters.

    chunk 0 feeds the whole file to trl_rx_feed, 1 uses trl_rx_push/poll byte by
    byte, 7 feeds 7-byte pieces: the output may not depend on how bytes arrive.
    """
    section = MANIFEST["host_to_device"][name]
    assert parse_lines(c_main, VECTORS / name, chunk) == expected_lines(section)


@pytest.mark.parametrize("name", COMMAND_FILES)
def test_python_decoder_agrees_on_the_command_streams(name: str) -> None:
    """BinaryDecoder (the host's receiver) finds the same commands and counts the same errors."""
    section = MANIFEST["host_to_device"][name]
    dec = BinaryDecoder()
    events = dec.feed((VECTORS / name).read_bytes())
    assert python_commands(events) == line_commands(expected_lines(section))
    exp = section["expected"]
    assert dec.stats.header_crc_errors == exp["header_crc_errors"]
    assert dec.stats.frame_crc_errors == exp["frame_crc_errors"]
    assert dec.stats.bytes_skipped == exp["skipped"]
    intact = section["survivors"] if "survivors" in section else section["frames"]
    assert dec.stats.frames_ok == len(intact)
    crc_events = [e for e in events if isinstance(e, CrcError)]
    assert len(crc_events) == exp["header_crc_errors"] + exp["frame_crc_errors"]


def _damaged_stream(rng: np.random.Generator, pieces: int) -> tuple[bytes, list[str]]:
    """A host -> device stream of intact, refused and damaged frames, and the lines owed.

    Every frame takes the next seq (starting near the 65535 -> 0 wrap); only
    intact COMMAND frames owe a line. Damage: a flipped payload, CRC or header
    byte, a truncated frame, random garbage, a false magic with 8 random bytes,
    and intact frames that are not for a device (other type, version 2).
    """
    out = bytearray()
    lines: list[str] = []
    seq = 65_500
    kinds = (
        "ok",
        "ok",
        "ok",
        "length",
        "unknown",
        "other",
        "version",
        "payload",
        "header",
        "cut",
        "garbage",
        "magic",
    )

    def rand(n: int) -> bytes:
        return rng.integers(0, 256, n, dtype=np.uint8).tobytes()

    def good_command() -> tuple[bytes, str]:
        op = Opcode(int(rng.integers(1, 6)))
        tag = int(rng.integers(0, 1 << 16))
        arg = int(rng.integers(0, 1 << 32)) if op in fr.OPCODES_WITH_ARGUMENT else 0
        raw = FrameEncoder(first_seq=seq).command(Command(op, tag, arg))
        return raw, f"seq={seq & 0xFFFF} opcode={int(op)} tag={tag} arg={arg}"

    for i in range(pieces):
        kind = "ok" if i == pieces - 1 else kinds[int(rng.integers(len(kinds)))]
        if kind in ("garbage", "magic"):
            out += rand(int(rng.integers(1, 25))) if kind == "garbage" else b"\xe7\x19" + rand(8)
            continue
        if kind == "ok":
            raw, line = good_command()
            out += raw
            lines.append(line)
        elif kind in ("length", "unknown"):
            tag = int(rng.integers(0, 1 << 16))
            if kind == "length":
                op = int(rng.integers(1, 6))
                right = 8 if op in fr.OPCODES_WITH_ARGUMENT else 4
                # Any payload the device can buffer (0..18 bytes) but the right one.
                size = int(rng.choice([n for n in range(19) if n != right]))
            else:
                op = int(rng.choice([0, *range(6, 256)]))
                size = int(rng.choice([4, 8]))
            payload = (bytes([op, 0]) + tag.to_bytes(2, "little") + rand(14))[:size]
            out += fr.frame(int(fr.FrameType.COMMAND), seq, payload)
            shown_op = op if size >= 1 else 0
            known = shown_op in {o.value for o in Opcode}
            result = AckResult.BAD_ARGUMENT if known else AckResult.UNKNOWN_COMMAND
            lines.append(
                f"refused opcode={shown_op} tag={tag if size >= 4 else 0} result={int(result)}"
            )
        elif kind == "other":
            ftype, size = [(0x04, 8), (0x03, 16), (0x02, 12), (0x7E, 0)][int(rng.integers(4))]
            out += fr.frame(ftype, seq, rand(size))
        elif kind == "version":
            out += fr.frame(int(fr.FrameType.COMMAND), seq, bytes([1, 0]) + rand(2), version=2)
        else:
            broken = bytearray(good_command()[0])
            if kind == "cut":
                out += broken[: int(rng.integers(1, len(broken)))]
            else:
                lo, hi = (10, len(broken)) if kind == "payload" else (0, 10)
                broken[int(rng.integers(lo, hi))] ^= int(rng.integers(1, 256))
                out += broken
        seq += 1
    return bytes(out), lines


def test_random_damage_c_and_python_agree(c_programs: dict[str, Path], tmp_path: Path) -> None:
    """On a long damaged stream the C parser, the Python decoder and the construction agree.

    The construction says which commands are intact (a flipped byte always breaks
    a CRC-16 or CRC-32 check: both detect every single-byte error, a property of
    CRCs whose polynomial has more than one term; W. W. Peterson and D. T. Brown,
    "Cyclic Codes for Error Detection", Proc. IRE 49(1), 1961). The error counters
    of C and Python must match; every build of vectors_main, chunking and
    byte-at-a-time feeding prints the same.
    """
    stream, lines = _damaged_stream(np.random.default_rng(20_240_601), 400)
    path = tmp_path / "damaged.bin"
    path.write_bytes(stream)
    reference = parse_lines(c_programs["strict"], path)
    assert reference[:-1] == lines
    dec = BinaryDecoder()
    events = dec.feed(stream)
    assert python_commands(events) == line_commands(reference)
    got = counters(reference)
    assert got["header_crc_errors"] == dec.stats.header_crc_errors > 0
    assert got["frame_crc_errors"] == dec.stats.frame_crc_errors > 0
    assert got["skipped"] == dec.stats.bytes_skipped > 0
    for build, exe in c_programs.items():
        for chunk in (0, 1, 5):
            assert parse_lines(exe, path, chunk) == reference, (build, chunk)


def test_frame_too_long_for_the_device_is_passed_over(c_main: Path, tmp_path: Path) -> None:
    """An intact 66-byte DATA frame on the device's input (payload over 18 bytes) is skipped.

    The device parser buffers 32 bytes, so a good header announcing a longer
    payload is passed over byte by byte (counted as skipped, not as a CRC error)
    and the commands on both sides of it are still found.
    """
    host = FrameEncoder()
    start = host.command(Command(Opcode.START, 10))
    data = host.data(0, np.arange(20, dtype=np.int64).reshape(20, 1) * 3, SampleFormat.INT16)
    stop = host.command(Command(Opcode.STOP, 11))
    stream = start + data + stop
    assert stream.count(b"\xe7\x19") == 3
    path = tmp_path / "long.bin"
    path.write_bytes(stream)
    for chunk in (0, 1):
        assert parse_lines(c_main, path, chunk) == [
            "seq=0 opcode=1 tag=10 arg=0",
            "seq=2 opcode=2 tag=11 arg=0",
            f"header_crc_errors=0 frame_crc_errors=0 skipped={len(data)}",
        ]


# --- encoder limits -------------------------------------------------------------------


def _many(n: int) -> npt.NDArray[np.int64]:
    """The spread of int16 codes vectors_main.c uses: (i x 7919 mod 65536) - 32768."""
    return (np.arange(n, dtype=np.int64) * 7919) % 65536 - 32768


def _data(codes: npt.ArrayLike, fmt: SampleFormat) -> bytes:
    return FrameEncoder(first_seq=30).data(77, codes, fmt)


def _info(
    channels: list[tuple[float, int]],
    fmt: SampleFormat = SampleFormat.INT24,
    rate: int = 48_000_000,
    device_id: str = "EDGE",
) -> bytes:
    info = DeviceInfo(
        1, fmt, rate, device_id, "0.1", tuple(ChannelInfo(fs, b) for fs, b in channels)
    )
    return FrameEncoder(first_seq=20).info(info)


_BUSY = Ack(int(Opcode.STOP), AckResult.BUSY, 0x0102, 0)


def _acks(first_seq: int, count: int) -> bytes:
    enc = FrameEncoder(first_seq=first_seq)
    return b"".join(enc.ack(_BUSY) for _ in range(count))


def _f32_specials() -> bytes:
    values = [np.inf, -np.inf, -0.0, 2.0**-149, 3.4028234663852886e38, -(2**23 - 1) * 2.0**-149]
    frame = FrameEncoder(first_seq=40).data(0, np.reshape(values, (2, 3)), SampleFormat.FLOAT32)
    # IEEE 754 binary32 patterns (from memory): +inf, -inf, -0, smallest subnormal,
    # largest finite, largest negative subnormal.
    bits = [0x7F800000, 0xFF800000, 0x80000000, 0x00000001, 0x7F7FFFFF, 0x807FFFFF]
    assert frame[22:-4] == struct.pack("<6I", *bits) == struct.pack("<6f", *values)
    return frame


I16, I24, I32, F32 = (
    SampleFormat.INT16,
    SampleFormat.INT24,
    SampleFormat.INT32,
    SampleFormat.FLOAT32,
)
ONE = [(2.5, 24)]
# Case name (as vectors_main --selftest prints it) -> the same frame through Python.
ENCODER_CASES: dict[str, Callable[[], bytes]] = {
    "int16_edges": lambda: _data([[32767], [-32768]], I16),
    "int16_over": lambda: _data([[32768]], I16),
    "int16_under": lambda: _data([[-32769]], I16),
    "int24_over": lambda: _data([[8388608]], I24),
    "int24_under": lambda: _data([[-8388609]], I24),
    "int16_1ch_4090": lambda: _data(_many(4090).reshape(-1, 1), I16),
    "int16_1ch_4091": lambda: _data(_many(4091).reshape(-1, 1), I16),
    "int24_4ch_681": lambda: _data(_many(4 * 681).reshape(-1, 4), I24),
    "int24_4ch_682": lambda: _data(_many(4 * 682).reshape(-1, 4), I24),
    "int24_2ch_0": lambda: _data(np.zeros((0, 2), dtype=np.int64), I24),
    "int16_2ch_cap_exact": lambda: _data(_many(6).reshape(3, 2), I16),
    "int16_2ch_cap_short": lambda: _data(_many(6).reshape(3, 2), I16),
    "f32_specials": _f32_specials,
    "info_16ch": lambda: _info(ONE * 16),
    "info_17ch": lambda: _info(ONE * 17),
    "info_rate_999": lambda: _info(ONE, rate=999),
    "info_rate_1000": lambda: _info(ONE, rate=1000),
    "info_rate_1e9": lambda: _info(ONE, rate=1_000_000_000),
    "info_rate_1e9_plus_1": lambda: _info(ONE, rate=1_000_000_001),
    "info_id_16": lambda: _info(ONE, device_id="ABCDEFGHIJKLMNOP"),
    "info_id_17": lambda: _info(ONE, device_id="ABCDEFGHIJKLMNOPQ"),
    "info_id_non_ascii": lambda: _info(ONE, device_id="café"),
    "info_int16_bits_16": lambda: _info([(2.5, 12), (2.5, 16)], I16),
    "info_int16_bits_17": lambda: _info([(2.5, 12), (2.5, 17)], I16),
    "info_int16_bits_0": lambda: _info([(2.5, 12), (2.5, 0)], I16),
    "info_int32_bits_32": lambda: _info([(2.5, 12), (2.5, 32)], I32),
    "info_float32_bits_24": lambda: _info([(2.5, 12), (2.5, 24)], F32),
    "info_float32_bits_25": lambda: _info([(2.5, 12), (2.5, 25)], F32),
    "info_fs_zero": lambda: _info([(2.5, 24), (0.0, 24)]),
    "info_fs_negative": lambda: _info([(2.5, 24), (-1.0, 24)]),
    "info_fs_inf": lambda: _info([(2.5, 24), (float("inf"), 24)]),
    "info_fs_subnormal": lambda: _info([(2.5, 24), (2.0**-149, 24)]),
    "ack_wrap": lambda: _acks(65535, 2),
    "ack_after_refusals": lambda: _acks(7, 1),
}
_CASE = re.compile(r"case (\S+) cap=(\d+) len=(\d+) (-|[0-9a-f]+)$")


def _selftest_cases(exe: Path) -> Iterator[tuple[str, int, bytes | None]]:
    for line in run(exe, "--selftest").splitlines():
        if line.startswith("case "):
            m = _CASE.match(line)
            assert m, line
            name, cap, length, hexed = m.groups()
            frame = None if hexed == "-" else bytes.fromhex(hexed)
            assert int(length) == (0 if frame is None else len(frame))
            yield name, int(cap), frame


def test_encoder_limits_match_python(c_main: Path) -> None:
    """The C encoders refuse exactly what the Python encoder refuses, and build the same bytes.

    A case is refused (length 0) when Python raises ValueError (ProtocolError and
    UnicodeEncodeError are ValueErrors) or the frame is longer than the caller's
    capacity; otherwise the bytes are identical. Limits: PROTOCOL.md sections 1
    and 3 (payload <= 8192 bytes, 1..16 channels, rates 1 Hz..1 MHz, 16 ASCII
    characters, adc_bits up to the format's bits); the seq wraps 65535 -> 0 and
    a refused frame takes no seq. Float bit patterns: IEEE Std 754-2008, 3.4.
    """
    seen = []
    for name, cap, frame in _selftest_cases(c_main):
        seen.append(name)
        try:
            expected: bytes | None = ENCODER_CASES[name]()
        except ValueError:
            expected = None
        if expected is not None and len(expected) > cap:
            expected = None
        assert frame == expected, name
    assert sorted(seen) == sorted(ENCODER_CASES)


# --- every build agrees ---------------------------------------------------------------


@pytest.mark.parametrize("build", [b for b in BUILDS if b != "strict"])
def test_other_builds_give_the_same_output(
    c_programs: dict[str, Path], c_vectors: dict[str, bytes], build: str, tmp_path: Path
) -> None:
    """Extra warnings, table-free CRCs and AddressSanitizer/UBSan builds print the same.

    The sanitized build stops with an error on any out-of-bounds access, overflow
    of a signed integer or other undefined behaviour.
    """
    exe = c_programs[build]
    assert write_vectors(exe, tmp_path / "v") == c_vectors
    assert run(exe, "--selftest") == run(c_programs["strict"], "--selftest")
    for name in COMMAND_FILES:
        for chunk in (0, 1):
            assert parse_lines(exe, VECTORS / name, chunk) == expected_lines(
                MANIFEST["host_to_device"][name]
            )
