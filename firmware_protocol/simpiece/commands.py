"""The simulated test piece's command handling: the host's binary commands and their ACKs.

START, STOP, SET_RATE, PING and IDENTIFY as PROTOCOL.md describes them; a
command the decoder could not accept is answered with its error result.
"""

from __future__ import annotations

import time

from .. import frames as fr
from ..events import BadCommand, CommandReceived
from .core import PieceCore
from .settings import MAX_RATE_HZ, MIN_RATE_HZ
from .synth import ResponseSynth


class PieceCommands(PieceCore):
    """Answers the host's commands (called from the streaming thread)."""

    def _handle_input(self, data: bytes) -> None:
        for event in self._decoder.feed(data):
            if isinstance(event, CommandReceived):
                self.counters.commands += 1
                self._command(event.command)
            elif isinstance(event, BadCommand):
                self.counters.commands += 1
                self._queue(
                    self._enc.ack(fr.Ack(event.opcode, fr.AckResult(event.result), event.tag))
                )

    def _command(self, cmd: fr.Command) -> None:
        ok, busy = fr.AckResult.OK, fr.AckResult.BUSY
        if cmd.opcode is fr.Opcode.START:
            self._queue(self._enc.ack(fr.Ack(cmd.opcode, ok, cmd.tag)))
            with self._lock:
                self._synth.reset()
                self._begin_stream()
        elif cmd.opcode is fr.Opcode.STOP:
            self._streaming = False
            self._queue(self._enc.ack(fr.Ack(cmd.opcode, ok, cmd.tag)))
        elif cmd.opcode is fr.Opcode.SET_RATE:
            rate = cmd.argument / 1000.0
            if self._streaming:
                self._queue(self._enc.ack(fr.Ack(cmd.opcode, busy, cmd.tag)))
            elif not MIN_RATE_HZ <= rate <= MAX_RATE_HZ:
                bad = fr.AckResult.BAD_ARGUMENT
                self._queue(self._enc.ack(fr.Ack(cmd.opcode, bad, cmd.tag)))
            else:
                with self._lock:
                    self._rate_hz = rate
                    self._synth = ResponseSynth(
                        self.model, rate, self.settings.frame_samples, self.settings.anti_alias
                    )
                self._queue(self._enc.ack(fr.Ack(cmd.opcode, ok, cmd.tag, cmd.argument)))
        elif cmd.opcode is fr.Opcode.PING:
            self._queue(self._enc.ack(fr.Ack(cmd.opcode, ok, cmd.tag, cmd.argument)))
        elif cmd.opcode is fr.Opcode.IDENTIFY:
            self._queue(self._enc.ack(fr.Ack(cmd.opcode, ok, cmd.tag)))
            self._send_info(time.monotonic())
