"""The link process: `python -m taprig.daemon.capture.linkchild URL BAUDRATE STALL_S`.

Started by `ProcessLink` (linkproc.py), never by hand. A `SerialLink` reads the port in this
small process; the main thread forwards what it read to stdout as frames, and a second
thread carries the daemon's writes and reconnect requests from stdin to the port. The end of
stdin (the daemon closed it, or died) closes the port and ends the process.

Imports pyserial and the link, nothing else of the daemon: it must start fast and stay small.
"""

from __future__ import annotations

import os
import queue
import signal
import sys
import threading
from typing import BinaryIO

from .link import LinkChange, SerialLink
from .linkproc import (
    CHILD_QUEUE_CHUNKS,
    DATA,
    KICK,
    WRITE,
    FrameReader,
    pack,
    pack_counts,
    pack_state,
)

BATCH_BYTES = 1 << 18  # at most this much is gathered into one write to the daemon


def _commands(link: SerialLink, stdin: BinaryIO, ended: threading.Event) -> None:
    """Carry the daemon's frames to the port until stdin ends."""
    frames = FrameReader(stdin)
    while (frame := frames.next()) is not None:
        kind, payload = frame
        if kind == WRITE:
            link.send(payload)
        elif kind == KICK:
            why = payload[1:].decode("utf-8", "replace")
            link.reconnect(why, only_if_stalled=payload[:1] == b"?")
    ended.set()


def _forward(link: SerialLink, out: BinaryIO, ended: threading.Event) -> None:
    """Send what the link read, batched, until the daemon ends our stdin or stops reading."""
    counts = (link.reconnects, link.dropped_chunks)
    while not ended.is_set():
        try:
            item = link.items.get(timeout=0.1)
        except queue.Empty:
            continue
        batch = [_frame(item)]
        size = len(batch[0])
        while size < BATCH_BYTES:  # whatever else is already waiting goes in the same write
            try:
                more = _frame(link.items.get_nowait())
            except queue.Empty:
                break
            batch.append(more)
            size += len(more)
        now = (link.reconnects, link.dropped_chunks)
        if now != counts:
            counts = now
            batch.append(pack_counts(*now))
        try:
            out.write(b"".join(batch))
            out.flush()
        except (BrokenPipeError, OSError):
            return  # the daemon is gone


def _frame(item: bytes | LinkChange) -> bytes:
    return pack_state(item) if isinstance(item, LinkChange) else pack(DATA, item)


def main(argv: list[str]) -> int:
    # Ctrl-C in a terminal and systemd's stop signal reach the whole process group; the
    # daemon ends this process itself, by closing its stdin, once it has stopped reading.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_IGN)
    url, baudrate, stall_s = argv[0], int(argv[1]), float(argv[2])
    stdin = os.fdopen(sys.stdin.fileno(), "rb", buffering=0)
    out = os.fdopen(sys.stdout.fileno(), "wb", buffering=0)
    ended = threading.Event()
    link = SerialLink(url, baudrate=baudrate, stall_after_s=stall_s,
                      queue_chunks=CHILD_QUEUE_CHUNKS).start()  # fmt: skip
    threading.Thread(target=_commands, args=(link, stdin, ended), daemon=True).start()
    try:
        _forward(link, out, ended)
    finally:
        link.close()
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
