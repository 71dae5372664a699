"""Sample arrays to and from the bytes of DATA frames, vectorised with numpy.

Shapes: the wire carries sample frames of C channels interleaved; in memory a
block is (channels, n) so each channel is a contiguous row for the DSP stages.
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from .frames import SampleFormat

_INT_DTYPES: dict[SampleFormat, np.dtype[np.signedinteger]] = {
    SampleFormat.INT16: np.dtype("<i2"),
    SampleFormat.INT32: np.dtype("<i4"),
}


def code_limits(fmt: SampleFormat) -> tuple[int, int]:
    """Smallest and largest integer code of an integer format."""
    bits = fmt.container_bits
    return -(1 << (bits - 1)), (1 << (bits - 1)) - 1


def pack_samples(codes: npt.ArrayLike, fmt: SampleFormat) -> bytes:
    """Interleave and pack samples.

    codes: (n, channels) array, sample frame major. Integer codes for the
    integer formats (checked against the container's range), volts for float32.
    """
    arr = np.asarray(codes)
    if arr.ndim != 2:
        raise ValueError(f"codes must be (n, channels); got shape {arr.shape}")
    if fmt is SampleFormat.FLOAT32:
        return arr.astype("<f4").tobytes()
    lo, hi = code_limits(fmt)
    if arr.size and (int(arr.min()) < lo or int(arr.max()) > hi):
        raise ValueError(f"sample codes outside {lo}..{hi} for {fmt.name.lower()}")
    if fmt is SampleFormat.INT24:
        as32 = np.ascontiguousarray(arr, dtype="<i4").reshape(-1)
        return as32.view(np.uint8).reshape(-1, 4)[:, :3].tobytes()
    packed: bytes = np.ascontiguousarray(arr, dtype=_INT_DTYPES[fmt]).tobytes()
    return packed


def unpack_codes(
    raw: bytes | bytearray | memoryview, fmt: SampleFormat, channels: int
) -> np.ndarray:
    """Raw interleaved sample bytes to an (n, channels) array.

    int32 codes for the integer formats, float32 volts for float32.
    """
    if fmt is SampleFormat.FLOAT32:
        return np.frombuffer(raw, dtype="<f4").reshape(-1, channels)
    if fmt is SampleFormat.INT24:
        b = np.frombuffer(raw, dtype=np.uint8).reshape(-1, 3)
        # Little-endian 24-bit two's complement: place the three bytes in the
        # top of a 32-bit word, then an arithmetic shift sign-extends.
        w = np.empty((b.shape[0], 4), dtype=np.uint8)
        w[:, 0] = 0
        w[:, 1:] = b
        v = w.view("<i4").reshape(-1) >> 8
        return v.reshape(-1, channels)
    ints: np.ndarray = np.frombuffer(raw, dtype=_INT_DTYPES[fmt])
    return ints.reshape(-1, channels).astype(np.int32)


def codes_to_volts(codes: np.ndarray, volts_per_code: npt.ArrayLike) -> np.ndarray:
    """(n, channels) codes to a (channels, n) float64 block in volts."""
    scale = np.asarray(volts_per_code, dtype=np.float64)
    return (codes.T * scale[:, None]).astype(np.float64, copy=False)
