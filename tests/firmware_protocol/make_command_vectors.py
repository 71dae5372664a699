"""Writes the host -> device golden files commands.bin and commands_noisy.bin.

Both are built with the Python encoder from the "host_to_device" section of
firmware_protocol/vectors/manifest.json, which says what each frame holds and
how the noisy stream is damaged. Run after a deliberate change to that section:
    python tests/firmware_protocol/make_command_vectors.py
test_c_reference.py rebuilds both streams with these functions and compares
them with the committed files.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from taprig.firmware_protocol import Command, FrameEncoder, Opcode
from taprig.firmware_protocol import frames as fr

VECTORS = Path(__file__).resolve().parents[2] / "firmware_protocol" / "vectors"
MANIFEST = VECTORS / "manifest.json"


def load_manifest() -> dict[str, Any]:
    """The parsed manifest.json."""
    with MANIFEST.open(encoding="utf-8") as f:
        data: dict[str, Any] = json.load(f)
    return data


def command_frame(spec: dict[str, Any]) -> bytes:
    """One COMMAND frame from a manifest entry {seq, opcode, tag[, argument]}.

    Known opcodes go through FrameEncoder; an opcode the protocol does not
    define cannot be a `Command`, so its 4-byte payload (opcode, reserved, tag)
    is wrapped in the envelope directly.
    """
    seq, opcode, tag = int(spec["seq"]), int(spec["opcode"]), int(spec["tag"])
    if opcode in {o.value for o in Opcode}:
        command = Command(Opcode(opcode), tag, int(spec.get("argument", 0)))
        return FrameEncoder(first_seq=seq).command(command)
    payload = bytes([opcode, 0]) + tag.to_bytes(2, "little")
    return fr.frame(int(fr.FrameType.COMMAND), seq, payload)


def build_commands(section: dict[str, Any]) -> list[bytes]:
    """The frames of commands.bin, in order."""
    return [command_frame(f) for f in section["frames"]]


def build_noisy(section: dict[str, Any], clean: list[bytes]) -> bytes:
    """commands_noisy.bin from its layout: garbage, a half frame, damaged frames."""
    out = bytearray()
    for piece in section["layout"]:
        if "garbage_hex" in piece:
            out += bytes.fromhex(piece["garbage_hex"])
        elif "half_frame" in piece:
            half = piece["half_frame"]
            out += command_frame(half)[: int(half["keep"])]
        else:
            raw = bytearray(clean[int(piece["frame"])])
            if "xor_offset" in piece:
                raw[int(piece["xor_offset"])] ^= int(piece["xor_mask"])
            out += raw
    return bytes(out)


def build_all(manifest: dict[str, Any]) -> dict[str, bytes]:
    """File name -> contents of both host -> device streams."""
    h2d = manifest["host_to_device"]
    clean = build_commands(h2d["commands.bin"])
    return {
        "commands.bin": b"".join(clean),
        "commands_noisy.bin": build_noisy(h2d["commands_noisy.bin"], clean),
    }


def main() -> None:
    for name, data in build_all(load_manifest()).items():
        (VECTORS / name).write_bytes(data)
        print(f"wrote {VECTORS / name} ({len(data)} bytes)")


if __name__ == "__main__":
    main()
