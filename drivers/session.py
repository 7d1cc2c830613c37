"""A message session over a transport: the one place for terminations, timeouts, retries,
error-queue checks and I/O tracing.  Text goes in and out here; bytes stay below.

Two framings share the code:

- *message* framing (SCPI over VISA): a command line, then -- for a query -- one response
  message; errors wait in the instrument's error queue (``SYSTem:ERRor?``);
- *prompted* framing (terminal-style line instruments, PROTOCOLS.md §2): every command is
  echoed, answered by zero or more reply lines and closed by a prompt; an error is a reply
  line of its own form and is raised at once.

Robustness: a query marked idempotent is repeated after a lost link or a timeout -- on a
fresh link, a bounded number of times, each repetition logged and counted in
:attr:`MessageSession.recoveries`.  Anything else (a trigger, reading the error queue) is
never repeated: its failure is raised, saying so.
"""

from __future__ import annotations

import logging
import re
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import TypeVar

import numpy as np

from lineproof.drivers import ieee488, line_protocol
from lineproof.drivers.transports import Transport
from lineproof.errors import InstrumentReported, LinkError, ReplyError

log = logging.getLogger("lineproof.io")

#: Longest text line we accept before calling the reply malformed (bytes).
_LINE_LIMIT = 1 << 22
#: Trace lines are cut to this many characters so a debug log of a run stays readable.
TRACE_LIMIT = 200
#: Bytes of a binary payload shown (as hex) in a trace line.
_TRACE_BYTES = 16
#: Pauses between the reads of a polled status register: short at first (a sweep may be
#: over at once), growing so that a long sweep costs few reads.
_POLL_FIRST_PAUSE_S = 0.001
_POLL_LONGEST_PAUSE_S = 0.05

Result = TypeVar("Result")


@dataclass(frozen=True)
class Framing:
    """How messages are framed on the wire."""

    write_termination: bytes = b"\n"
    read_termination: bytes = b"\n"
    #: The instrument echoes each command line (it is read back, checked and dropped).
    echo: bool = False
    #: Sent after every response: the end of a response, for prompted framing.
    prompt: bytes | None = None
    #: A reply line that reports an error: a pattern with groups ``code`` and ``text``.
    error_line: re.Pattern[str] | None = None
    #: The word of the ``<word> <count>`` line that ends a block of number rows.
    rows_end: str = "end"

    @property
    def prompted(self) -> bool:
        return self.prompt is not None


def _trace(resource: str, arrow: str, text: str) -> None:
    if log.isEnabledFor(logging.DEBUG):
        shown = text if len(text) <= TRACE_LIMIT else f"{text[:TRACE_LIMIT]}... ({len(text)} chars)"
        log.debug("%s %s %s", resource, arrow, shown)


class MessageSession:
    """Write commands and read replies on one instrument link."""

    def __init__(
        self,
        transport: Transport,
        framing: Framing | None = None,
        default_timeout_s: float = 5.0,
        block_cap: int = ieee488.DEFAULT_BLOCK_CAP,
        retries: int = 2,
        error_query: str | None = None,
    ) -> None:
        self.transport = transport
        self.framing = framing or Framing()
        self.default_timeout_s = default_timeout_s
        self.block_cap = block_cap
        self.retries = retries
        #: The query that reads one error-queue entry (message framing); asked after a query
        #: went unanswered, because an instrument does not answer a query it refused.
        self.error_query = error_query
        self.last_command: str | None = None
        #: One sentence per recovered failure (a repeated query), for the run's record.
        self.recoveries: list[str] = []
        #: Commands written since the error queue was last read (the suspects of an entry).
        self._since_check: list[str] = []
        #: (command, idempotent) written without a reply since the last reply on this link,
        #: and those of a lost link, to be sent again before anything else on the new one.
        self._unconfirmed: list[tuple[str, bool]] = []
        self._lost: list[tuple[str, bool]] = []
        self._stale = False
        #: How long a resynchronisation waits for a late reply (the failed exchange's timeout).
        self._resync_timeout_s = default_timeout_s
        #: A command was written and its response is not completely read yet.
        self._in_response = False
        self._terminators = (self.framing.read_termination,)
        if self.framing.prompt:
            self._terminators += (self.framing.prompt,)

    @property
    def resource(self) -> str:
        return self.transport.resource

    def _deadline(self, timeout_s: float | None) -> float:
        return time.monotonic() + (self.default_timeout_s if timeout_s is None else timeout_s)

    # -- the wire -------------------------------------------------------------------------

    def _write(self, command: str, deadline: float) -> None:
        self.last_command = command
        self._in_response = True
        if command != self.error_query:
            self._since_check = [*self._since_check[-7:], command]
        _trace(self.resource, "<-", command)
        self.transport.write_raw(command.encode("ascii") + self.framing.write_termination, deadline)
        if self.framing.echo:
            self._read_echo(command, deadline)

    def _read_echo(self, command: str, deadline: float) -> None:
        """Read back the echo of ``command``.  Prompts and empty lines in front of it are the
        answers to earlier synchronising empty lines (or the prompt of a fresh open): skipped."""
        while True:
            echo, _ = self._read_line(deadline, (self.framing.read_termination,))
            prompt = self._prompt_text or ""
            while prompt and echo.startswith(prompt):
                echo = echo[len(prompt):]
            if echo:
                break
        try:
            line_protocol.strip_echo(echo, command, self._prompt_text)
        except ieee488.CodecError as exc:
            raise ReplyError(str(exc), resource=self.resource, command=command,
                             expected="the echo of the command") from exc

    @property
    def _prompt_text(self) -> str | None:
        return self.framing.prompt.decode("ascii") if self.framing.prompt else None

    def _read_line(self, deadline: float, terminators: tuple[bytes, ...] | None = None) -> tuple[str, bool]:
        """One line as text without its terminator, and whether the prompt ended it."""
        raw = self.transport.read_line_raw(terminators or self._terminators, deadline, _LINE_LIMIT)
        prompt = self.framing.prompt
        at_prompt = prompt is not None and raw.endswith(prompt)
        end = prompt if at_prompt else self.framing.read_termination
        if raw.endswith(end):
            raw = raw[: -len(end)]
        try:
            text = raw.rstrip(b"\r").decode("ascii")
        except UnicodeDecodeError as exc:
            raise ReplyError(f"reply is not ASCII text: {raw[:40]!r}", resource=self.resource,
                             command=self.last_command, expected="a line of ASCII text") from exc
        _trace(self.resource, "->", text + (" <prompt>" if at_prompt else ""))
        return text, at_prompt

    def _read_response(self, deadline: float) -> list[str]:
        """Prompted framing: the reply lines up to the prompt; an error line is raised."""
        lines: list[str] = []
        while True:
            line, at_prompt = self._read_line(deadline)
            if line or not at_prompt:
                lines.append(line)
            if at_prompt:
                break
        self._in_response = False
        self._raise_error_lines(lines)
        return lines

    def _raise_error_lines(self, lines: list[str]) -> None:
        pattern = self.framing.error_line
        if pattern is None:
            return
        for line in lines:
            try:
                entry = line_protocol.parse_error_line(line, pattern)
            except ieee488.CodecError as exc:
                raise ReplyError(str(exc), resource=self.resource, command=self.last_command) from exc
            if entry is not None:
                raise InstrumentReported(*entry, resource=self.resource, command=self.last_command)

    def _one_line(self, deadline: float, expected: str) -> str:
        if not self.framing.prompted:
            line, _ = self._read_line(deadline)
            self._in_response = False
            return line
        lines = self._read_response(deadline)
        if len(lines) != 1:
            raise ReplyError(f"{len(lines)} reply lines {lines[:3]!r}", resource=self.resource,
                             command=self.last_command, expected=expected)
        return lines[0]

    # -- transactions with retries ----------------------------------------------------------

    def _transact(self, command: str, exchange: Callable[[float], Result], timeout_s: float | None,
                  idempotent: bool, expected: str, confirms: bool = True, replay: bool = True) -> Result:
        """Run one write-and-read exchange; repeat it on a fresh link when it may be repeated.

        ``confirms``: the exchange reads a reply, which proves the instrument took every
        command written before it (SCPI executes in order).  Commands written without a reply
        since then may be lost with a link; ``replay`` sends the idempotent ones again on the
        fresh link first, and refuses to go on past a lost non-idempotent one.
        """
        attempts = 1 + (self.retries if idempotent else 0)
        failure: LinkError | None = None
        for attempt in range(1, attempts + 1):
            if replay:
                self._refuse_lost_actions(command, failure)
            try:
                if self._stale:
                    self._resynchronise()
                deadline = self._deadline(timeout_s)
                if replay and self._lost:
                    self._replay_lost(deadline)
                self._write(command, deadline)
                result = exchange(deadline)
            except LinkError as exc:
                self._stale = True
                self._lost += self._unconfirmed
                self._unconfirmed = []
                self._resync_timeout_s = self.default_timeout_s if timeout_s is None else timeout_s
                failure = exc
            except ReplyError:
                # Garbage in the middle of a response leaves the rest of it on the wire.
                self._stale = self._stale or self._in_response
                raise
            else:
                if confirms:
                    self._unconfirmed = []
                else:
                    self._unconfirmed.append((command, idempotent))
                return result
            self._raise_if_refused(command, failure)
            if attempt < attempts:
                note = f"{failure.problem}; repeated {command!r} on a fresh link (attempt {attempt + 1} of {attempts})"
                self.recoveries.append(note)
                log.warning("%s: %s", self.resource, note)
        raise self._final_failure(command, failure, idempotent, attempts, expected) from failure

    def _final_failure(self, command: str, failure: LinkError, idempotent: bool, attempts: int,
                       expected: str) -> LinkError:
        why = "not repeated: it is not idempotent" if not idempotent else \
            f"gave up after {attempts} attempt{'s' if attempts > 1 else ''}"
        if self._lost:
            why += "; sent before it without a reply, maybe lost: " + "; ".join(c for c, _ in self._lost)
            self._lost = []
        return LinkError(f"{failure.problem} ({why})", resource=self.resource, command=command, expected=expected)

    def _refuse_lost_actions(self, command: str, failure: LinkError | None) -> None:
        """A command that is not idempotent (a trigger) and was sent without a reply before the
        link was lost may or may not have run: going on could read stale data as new."""
        actions = [c for c, idempotent in self._lost if not idempotent]
        if actions:
            self._lost = []
            why = f"{failure.problem} during {command!r}; " if failure else ""
            raise LinkError(
                f"{why}the link was lost after {actions[0]!r} was sent without a reply: it may not have "
                "arrived, and it is not repeated", resource=self.resource, command=actions[0],
                expected="a reply confirming it",
            ) from failure

    def _replay_lost(self, deadline: float) -> None:
        """Send again, on the fresh link, the settings written since the last reply on the old one."""
        lost, self._lost = self._lost, []
        for command, _ in lost:
            self._write(command, deadline)
            self._unconfirmed.append((command, True))
        note = f"re-sent {len(lost)} setting(s) that may have been lost with the link: " + "; ".join(c for c, _ in lost)
        self.recoveries.append(note)
        log.warning("%s: %s", self.resource, note)

    def _resynchronise(self) -> None:
        """Start the next exchange on a clean stream.

        Message framing reopens the link, which drops every unread byte.  Prompted framing
        first waits for the prompt that ends whatever late reply is still coming -- as long
        again as the failed exchange was allowed, because a line instrument cannot be
        interrupted and would answer a stale command into the next exchange; if none comes,
        it reopens the port and sends an empty line, which the instrument answers with a
        line end and the prompt (PROTOCOLS.md §2).  A failure leaves the session stale.
        """
        if not self.framing.prompted:
            self.transport.reopen()
            self._stale = False
            return
        try:
            discarded = self._read_response_raw(self._deadline(self._resync_timeout_s))
        except LinkError:
            self.transport.reopen()
            deadline = self._deadline(None)
            self.transport.write_raw(self.framing.write_termination, deadline)
            ready = self.framing.read_termination + (self.framing.prompt or b"")
            discarded = [self.transport.read_line_raw((ready,), deadline, _LINE_LIMIT)]
        _trace(self.resource, "-> discarded", repr(discarded))
        self._stale = False

    def _read_response_raw(self, deadline: float) -> list[bytes]:
        chunks = []
        while True:
            chunk = self.transport.read_line_raw(self._terminators, deadline, _LINE_LIMIT)
            chunks.append(chunk)
            if chunk.endswith(self.framing.prompt or b"\n"):
                return chunks

    def _raise_if_refused(self, command: str, failure: LinkError) -> None:
        """An instrument does not answer a query it refused (IEEE 488.2 §6.5.7 query error
        handling, from memory): after an unanswered query, its error queue says why."""
        if self.error_query is None or command == self.error_query:
            return
        try:
            self._resynchronise()
            entry = self._next_error_entry()
        except (LinkError, ReplyError):
            self._stale = True
            return
        if entry[0] != 0:
            raise InstrumentReported(*entry, resource=self.resource, command=command) from failure

    # -- public operations ------------------------------------------------------------------

    def write(self, command: str, timeout_s: float | None = None) -> None:
        """Send one program message and read nothing back (message framing)."""
        self.send(command, timeout_s)

    def send(self, command: str, timeout_s: float | None = None, idempotent: bool = False) -> None:
        """A command without a reply.  With prompted framing the (empty) response is read,
        so an error line surfaces here."""
        def exchange(deadline: float) -> None:
            if not self.framing.prompted:
                self._in_response = False
                return
            lines = self._read_response(deadline)
            if lines:
                raise ReplyError(f"unexpected reply {lines[:3]!r}", resource=self.resource,
                                 command=command, expected="no reply")
        self._transact(command, exchange, timeout_s, idempotent, "no reply", confirms=self.framing.prompted)

    def read_line(self, timeout_s: float | None = None) -> str:
        """One response line, without its termination (message framing)."""
        try:
            line, _ = self._read_line(self._deadline(timeout_s))
            self._in_response = False
            return line
        except LinkError as exc:
            self._stale = True
            raise LinkError(exc.problem, resource=self.resource, command=self.last_command,
                            expected="a reply line") from exc

    def query(self, command: str, timeout_s: float | None = None, idempotent: bool = True) -> str:
        """Write, then read one reply line."""
        return self._transact(command, lambda deadline: self._one_line(deadline, "one reply line"),
                              timeout_s, idempotent, "one reply line")

    def query_block(self, command: str, timeout_s: float | None = None,
                    idempotent: bool = True) -> bytes | bytearray:
        """Write, then read an IEEE 488.2 arbitrary block; returns the payload (bytes-like).

        The header is read in two short reads, then the payload and its terminator in one
        exact-length read with the termination character off.  A declared length above the
        cap, a short payload or a missing line end after it is an error, never data; so is
        an indefinite-length block (``#0``), whose end a byte stream cannot show.
        """
        if self.framing.prompted:
            raise ReplyError("binary blocks are not read on a prompted line", resource=self.resource,
                             command=command)
        expected = "an IEEE 488.2 arbitrary block"

        def exchange(deadline: float) -> bytes | bytearray:
            try:
                return self._read_block(deadline)
            except ieee488.CodecError as exc:
                raise ReplyError(str(exc), resource=self.resource, command=command, expected=expected) from exc

        payload = self._transact(command, exchange, timeout_s, idempotent, expected)
        if log.isEnabledFor(logging.DEBUG):
            log.debug("%s -> block of %d bytes: %s...", self.resource, len(payload), payload[:_TRACE_BYTES].hex(" "))
        return payload

    def _read_block(self, deadline: float) -> bytes | bytearray:
        read = self.transport.read_exact_raw
        header_bytes = read(2, deadline)
        while (header := ieee488.parse_block_header(header_bytes, self.block_cap)) is None:
            # Two bytes give '#' and the digit count (or leading white space); then exactly
            # the length digits are known to follow.
            wanted = int(header_bytes[-1:]) if header_bytes[-2:-1] == b"#" else 1
            header_bytes += read(wanted, deadline)
        if header.payload_length is None:
            # IEEE 488.2 §8.7.10: the payload runs to NL^END.  A byte stream carries no END,
            # so only the first NL could end it -- and binary data holds that byte anywhere:
            # the payload would be cut and its rest read as the next reply.  Refused; the
            # rest of it stays unread and the link is renewed before the next command.
            raise ieee488.CodecError(
                "the instrument sent an indefinite-length block (#0, IEEE 488.2 §8.7.10), whose end cannot be "
                "told from a line feed inside binary data; refused -- fix: set the instrument to definite-length "
                'blocks, or read ASCII data (data_format = "ASCII" and reply = "numbers" in the profile)'
            )
        payload = read(header.payload_length, deadline)
        # A definite block is followed by the response message terminator (§8.5); anything
        # else means the payload length and the data disagree.
        terminator = self.framing.read_termination
        tail = read(len(terminator), deadline)
        if tail != terminator:
            raise ieee488.CodecError(
                f"block is longer than its header says (bytes {tail!r} where {terminator!r} should end it)"
            )
        self._in_response = False
        return payload

    def query_numbers(self, command: str, timeout_s: float | None = None, idempotent: bool = True) -> np.ndarray:
        """Write, then read an ASCII number list."""
        reply = self.query(command, timeout_s, idempotent)
        try:
            return ieee488.parse_number_list(reply)
        except ieee488.CodecError as exc:
            raise ReplyError(str(exc), resource=self.resource, command=command, expected="a list of numbers") from exc

    def query_rows(self, command: str, columns: int, timeout_s: float | None = None,
                   idempotent: bool = True) -> np.ndarray:
        """Write, then read rows of ``columns`` numbers ended by ``<end> <count>`` (the count
        checked); returns an array of shape (rows, columns)."""
        expected = f"rows of {columns} numbers ended by '{self.framing.rows_end} <count>'"

        def exchange(deadline: float) -> list[str]:
            if self.framing.prompted:
                return self._read_response(deadline)
            lines = []
            while not lines or line_protocol.parse_end_line(lines[-1], self.framing.rows_end) is None:
                lines.append(self._read_line(deadline)[0])
            self._in_response = False
            return lines

        lines = self._transact(command, exchange, timeout_s, idempotent, expected)
        try:
            return line_protocol.parse_rows(lines, columns, self.framing.rows_end)
        except ieee488.CodecError as exc:
            raise ReplyError(str(exc), resource=self.resource, command=command, expected=expected) from exc

    def wait_complete(self, command: str = "*OPC?", timeout_s: float | None = None) -> None:
        """Block until pending operations end (IEEE 488.2 §12.5.3 *OPC? synchronisation)."""
        reply = self.query(command, timeout_s)
        try:
            ieee488.parse_opc_reply(reply)
        except ieee488.CodecError as exc:
            raise ReplyError(str(exc), resource=self.resource, command=command, expected="1") from exc

    def poll_status(self, command: str, done_bits: int, timeout_s: float, arm: str | None = None) -> int:
        """Block until the status register ``command`` reads with any of ``done_bits`` set.

        For instruments that cannot hold a query open until a sweep ends: ``arm`` (``*OPC``)
        asks for the Operation Complete bit, bit 0 of ``*ESR?``, to be set when pending
        operations end (IEEE 488.2 §12.5.2), and the register is read until it is.  Between
        reads the pause grows from 1 ms to 50 ms; there is no fixed sleep, and the whole wait
        ends at ``timeout_s``.  Each read may clear the register (``*ESR?`` does), so none is
        ever repeated after a lost link.  Returns every bit seen set, for the caller to keep
        what the reads cleared (the Power On bit).
        """
        deadline = self._deadline(timeout_s)
        if arm:
            self.send(arm, timeout_s)
        seen = value = 0
        pause = _POLL_FIRST_PAUSE_S
        while True:
            left = deadline - time.monotonic()
            if left <= 0:
                raise LinkError(
                    f"timed out after {timeout_s:.3g} s: {command!r} read {value} (bits {value:#x}) and never "
                    f"any of bits {done_bits:#x}", resource=self.resource, command=command,
                    expected=f"a value with any of bits {done_bits:#x} set within {timeout_s:.3g} s",
                )
            reply = self.query(command, min(self.default_timeout_s, left), idempotent=False)
            try:
                value = ieee488.parse_status_register(reply)
            except ieee488.CodecError as exc:
                raise ReplyError(str(exc), resource=self.resource, command=command,
                                 expected="a status register value 0..65535") from exc
            seen |= value
            if value & done_bits:
                return seen
            time.sleep(max(0.0, min(pause, deadline - time.monotonic())))
            pause = min(2 * pause, _POLL_LONGEST_PAUSE_S)

    def _next_error_entry(self, command: str | None = None) -> tuple[int, str]:
        command = command or self.error_query or "SYSTem:ERRor?"
        reply = self._transact(command, lambda deadline: self._one_line(deadline, "an error entry"),
                               None, False, "an error-queue entry", replay=False)
        try:
            return ieee488.parse_error_entry(reply)
        except ieee488.CodecError as exc:
            raise ReplyError(str(exc), resource=self.resource, command=command,
                             expected='<code>,"<text>"') from exc

    def drain_errors(self, command: str | None = None, caused_by: str | None = None, limit: int = 32) -> None:
        """Read the error queue until empty; raise the first entry found, naming the command
        that caused it (SCPI-1999 Vol 2 §21.8: reading removes the oldest entry).

        The queue does not say which command caused an entry: ``caused_by`` names it when the
        caller checked right after one command; otherwise the commands written since the last
        check are named.
        """
        suspects = self._since_check
        self._since_check = []
        if caused_by is None:
            caused_by = suspects[-1] if len(suspects) == 1 else "one of: " + "; ".join(suspects)
        entries: list[tuple[int, str]] = []
        for _ in range(limit):
            entry = self._next_error_entry(command)
            if entry[0] == 0:
                break
            entries.append(entry)
        if entries:
            code, text = entries[0]
            more = f" (+{len(entries) - 1} more: {entries[1:4]})" if len(entries) > 1 else ""
            raise InstrumentReported(code, text + more, resource=self.resource, command=caused_by)

    def close(self) -> None:
        self.transport.close()
