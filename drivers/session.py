"""A message session over a transport: the one place for terminations, timeouts, error-queue
checks and I/O tracing.  Text goes in and out here; bytes stay below.
"""

from __future__ import annotations

import logging
import time
from dataclasses import dataclass

import numpy as np

from lineproof.drivers import ieee488
from lineproof.drivers.transports import Transport
from lineproof.errors import InstrumentReported, LinkError, ReplyError

log = logging.getLogger("lineproof.io")

#: Longest text line we accept before calling the reply malformed (bytes).
_LINE_LIMIT = 1 << 22
#: Trace lines are cut to this many characters so a debug log of a run stays readable.
_TRACE_LIMIT = 200


@dataclass(frozen=True)
class Framing:
    """How messages are framed on the wire."""

    write_termination: bytes = b"\n"
    read_termination: bytes = b"\n"


class MessageSession:
    """Write commands and read replies on one instrument link."""

    def __init__(
        self,
        transport: Transport,
        framing: Framing | None = None,
        default_timeout_s: float = 5.0,
        block_cap: int = ieee488.DEFAULT_BLOCK_CAP,
    ) -> None:
        self.transport = transport
        self.framing = framing or Framing()
        self.default_timeout_s = default_timeout_s
        self.block_cap = block_cap
        self.last_command: str | None = None

    @property
    def resource(self) -> str:
        return self.transport.resource

    def _deadline(self, timeout_s: float | None) -> float:
        return time.monotonic() + (self.default_timeout_s if timeout_s is None else timeout_s)

    def write(self, command: str, timeout_s: float | None = None) -> None:
        """Send one program message."""
        self.last_command = command
        log.debug("%s <- %s", self.resource, command[:_TRACE_LIMIT])
        data = command.encode("ascii") + self.framing.write_termination
        try:
            self.transport.write_raw(data, self._deadline(timeout_s))
        except LinkError as exc:
            exc.command = command
            raise

    def read_line(self, timeout_s: float | None = None) -> str:
        """One response message, without its termination."""
        try:
            raw = self.transport.read_line_raw(
                self.framing.read_termination, self._deadline(timeout_s), _LINE_LIMIT
            )
        except LinkError as exc:
            raise LinkError(
                exc.message, resource=self.resource, command=self.last_command,
                expected="a reply line",
            ) from exc
        text = raw[: -len(self.framing.read_termination)].rstrip(b"\r")
        try:
            decoded = text.decode("ascii")
        except UnicodeDecodeError as exc:
            raise ReplyError(
                f"reply is not ASCII text: {text[:40]!r}",
                resource=self.resource, command=self.last_command,
            ) from exc
        log.debug("%s -> %s", self.resource, decoded[:_TRACE_LIMIT])
        return decoded

    def query(self, command: str, timeout_s: float | None = None) -> str:
        """Write, then read one line."""
        self.write(command, timeout_s)
        return self.read_line(timeout_s)

    def query_block(self, command: str, timeout_s: float | None = None) -> bytes:
        """Write, then read an IEEE 488.2 arbitrary block; returns the payload.

        The header is read byte by byte (it is at most 11 bytes), then the payload in one
        exact-length read with the termination character off.  A declared length above the
        cap, a short payload or a missing line end after it is an error, never data.
        """
        self.write(command, timeout_s)
        deadline = self._deadline(timeout_s)
        header_bytes = b""
        try:
            while True:
                header = ieee488.parse_block_header(header_bytes, self.block_cap)
                if header is not None:
                    break
                header_bytes += self.transport.read_exact_raw(1, deadline)
            if header.payload_length is None:
                payload = self._read_indefinite(deadline)
            else:
                payload = self.transport.read_exact_raw(header.payload_length, deadline)
                self._expect_block_end(deadline)
        except ieee488.CodecError as exc:
            raise ReplyError(
                str(exc), resource=self.resource, command=command,
                expected="an IEEE 488.2 arbitrary block",
            ) from exc
        except LinkError as exc:
            raise LinkError(
                exc.message, resource=self.resource, command=command,
                expected="an IEEE 488.2 arbitrary block",
            ) from exc
        log.debug("%s -> block of %d bytes", self.resource, len(payload))
        return payload

    def _read_indefinite(self, deadline: float) -> bytes:
        # IEEE 488.2 §8.7.10: the payload runs to NL^END.  Without END on a byte stream, the
        # last NL is the end; an instrument must not use this form for binary data that can
        # contain NL, and our profiles only allow it for text-safe payloads.
        line = self.transport.read_line_raw(self.framing.read_termination, deadline, self.block_cap)
        return line[: -len(self.framing.read_termination)]

    def _expect_block_end(self, deadline: float) -> None:
        # A definite block is followed by the response message terminator (§8.5); anything
        # else means the payload length and the data disagree.
        terminator = self.framing.read_termination
        tail = self.transport.read_exact_raw(len(terminator), deadline)
        if tail != terminator:
            raise ieee488.CodecError(
                f"block is longer than its header says (next bytes {tail!r}, expected {terminator!r})"
            )

    def query_numbers(self, command: str, timeout_s: float | None = None) -> np.ndarray:
        """Write, then read an ASCII number list."""
        reply = self.query(command, timeout_s)
        try:
            return ieee488.parse_number_list(reply)
        except ieee488.CodecError as exc:
            raise ReplyError(
                str(exc), resource=self.resource, command=command, expected="a list of numbers"
            ) from exc

    def wait_complete(self, command: str = "*OPC?", timeout_s: float | None = None) -> None:
        """Block until pending operations end (IEEE 488.2 §12.5.3 *OPC? synchronisation)."""
        reply = self.query(command, timeout_s)
        try:
            ieee488.parse_opc_reply(reply)
        except ieee488.CodecError as exc:
            raise ReplyError(str(exc), resource=self.resource, command=command) from exc

    def drain_errors(
        self, command: str = "SYSTem:ERRor?", caused_by: str | None = None, limit: int = 32
    ) -> None:
        """Read the error queue until empty; raise the first entry found, naming the command
        that caused it (SCPI-1999 Vol 2 §21.8: reading removes the oldest entry)."""
        entries: list[tuple[int, str]] = []
        for _ in range(limit):
            reply = self.query(command)
            try:
                code, text = ieee488.parse_error_entry(reply)
            except ieee488.CodecError as exc:
                raise ReplyError(str(exc), resource=self.resource, command=command) from exc
            if code == 0:
                break
            entries.append((code, text))
        if entries:
            code, text = entries[0]
            more = f" (+{len(entries) - 1} more)" if len(entries) > 1 else ""
            raise InstrumentReported(
                code, text + more, resource=self.resource, command=caused_by or self.last_command
            )

    def close(self) -> None:
        self.transport.close()
