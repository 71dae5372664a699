"""The two CRCs of the device link: CRC-16/XMODEM (header) and CRC-32/ISO-HDLC (frame).

Both come from the standard library's C implementations: binascii.crc_hqx is
CRC-16/XMODEM when started from 0, and zlib.crc32 is CRC-32/ISO-HDLC.
"""

from __future__ import annotations

import binascii
import zlib
from typing import TypeAlias

BytesLike: TypeAlias = bytes | bytearray | memoryview


def crc16_xmodem(data: BytesLike) -> int:
    """CRC-16/XMODEM (poly 0x1021, init 0, no reflection, no final xor)."""
    return binascii.crc_hqx(data, 0)


def crc32(data: BytesLike) -> int:
    """CRC-32/ISO-HDLC (poly 0x04C11DB7 reflected, init and xorout 0xFFFFFFFF)."""
    return zlib.crc32(data) & 0xFFFFFFFF
