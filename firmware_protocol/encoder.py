"""Frame encoder: the device side (and the host's commands) of the binary protocol.

Used by the simulated test piece, the tests and the benchmarks. Each direction
of a link owns one encoder, which keeps that direction's frame counter.
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from . import frames as fr
from .samples import pack_samples


class FrameEncoder:
    """Builds complete frames and advances the frame counter by one per frame."""

    def __init__(self, first_seq: int = 0) -> None:
        self.seq = first_seq & 0xFFFF

    def _next(self, frame_type: fr.FrameType, payload: bytes) -> bytes:
        out = fr.frame(int(frame_type), self.seq, payload)
        self.seq = (self.seq + 1) & 0xFFFF
        return out

    def info(self, info: fr.DeviceInfo) -> bytes:
        return self._next(fr.FrameType.INFO, fr.pack_info(info))

    def data(self, first_sample: int, codes: npt.ArrayLike, fmt: fr.SampleFormat) -> bytes:
        """One DATA frame. codes: (n, channels), integer codes or float32 volts."""
        raw = pack_samples(codes, fmt)
        channels = _channels_of(codes)
        if not 1 <= channels <= fr.MAX_CHANNELS:
            raise ValueError(f"{channels} channels; a DATA frame carries 1..{fr.MAX_CHANNELS}")
        count = len(raw) // (channels * fmt.size) if channels else 0
        head = fr.pack_data_header(first_sample, channels, fmt, count)
        return self._next(fr.FrameType.DATA, head + raw)

    def status(self, status: fr.Status) -> bytes:
        return self._next(fr.FrameType.STATUS, fr.pack_status(status))

    def ack(self, ack: fr.Ack) -> bytes:
        return self._next(fr.FrameType.ACK, fr.pack_ack(ack))

    def command(self, command: fr.Command) -> bytes:
        return self._next(fr.FrameType.COMMAND, fr.pack_command(command))


def _channels_of(codes: npt.ArrayLike) -> int:
    arr = np.asarray(codes)
    return int(arr.shape[1]) if arr.ndim == 2 else 0


def max_frames_per_data(channels: int, fmt: fr.SampleFormat) -> int:
    """Most sample frames one DATA frame can carry (681 for 4 channels of int24)."""
    return (fr.MAX_PAYLOAD - fr.DATA_HEADER_SIZE) // (channels * fmt.size)
