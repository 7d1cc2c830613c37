"""An in-memory instrument for session unit tests (no sockets): a function maps each written
command to the bytes the instrument answers.  A read that finds too few bytes fails at once
as a timeout would; tests against real links live in tests/drivers/."""

from __future__ import annotations

from collections.abc import Callable

from lineproof.errors import LinkError


class ScriptedTransport:
    resource = "SCRIPTED::1::INSTR"
    seconds_per_byte = 0.0

    def __init__(self, answer: Callable[[bytes], bytes | None]) -> None:
        self.answer = answer
        self.inbox = bytearray()
        self.written: list[bytes] = []
        self.reopened = 0
        self.closed = False

    def write_raw(self, data: bytes, deadline: float) -> None:
        self.written.append(data)
        reply = self.answer(data)
        if reply:
            self.inbox += reply

    def read_line_raw(self, terminators: tuple[bytes, ...], deadline: float, limit: int) -> bytes:
        ends = [i + len(t) for t in terminators if (i := self.inbox.find(t)) >= 0]
        if not ends:
            raise LinkError("timed out waiting for a reply line", resource=self.resource)
        line = bytes(self.inbox[: min(ends)])
        del self.inbox[: min(ends)]
        return line

    def read_exact_raw(self, count: int, deadline: float) -> bytes:
        if len(self.inbox) < count:
            got = len(self.inbox)
            self.inbox.clear()
            raise LinkError(f"timed out reading {count} bytes (got {got})", resource=self.resource)
        data = bytes(self.inbox[:count])
        del self.inbox[:count]
        return data

    def reopen(self) -> None:
        self.inbox.clear()
        self.reopened += 1

    def close(self) -> None:
        self.closed = True
