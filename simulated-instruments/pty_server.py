"""The serial analyzer served on a pseudo-terminal (PROTOCOLS.md §2), from a thread.

The host opens :attr:`PtySerialServer.device_path` with pyserial (or any terminal program)
exactly as it would open a USB serial port.  This side does what a terminal-style
instrument does: it echoes each character, runs a command at CR (a LF is ignored), answers
with lines ended by CR LF and then the prompt, and sends the prompt once when the port
opens.  Both directions are paced to the configured baud rate at 10 bits per byte (start,
8 data, stop).

How the instrument knows the port opened: the slave side is closed here, so the kernel
reports a hang-up on the master while no program holds the port; packet mode
(``TIOCPKT``, Linux and BSD pseudo-terminals) reports the input flush that pyserial makes
as it opens the port.  The prompt follows that flush (or 0.1 s after the open, for hosts
that do not flush).  A host that closes and reopens within one poll interval shows no
hang-up, so it gets no fresh prompt: hosts synchronise with an empty line instead
(PROTOCOLS.md §2).  After a ``drop`` fault the instrument is silent until an open (its
input flush) brings it back.  POSIX only: there are no pseudo-terminals on Windows.
"""

from __future__ import annotations

import errno
import os
import select
import struct
import threading
import time

from lineproof.errors import InputError
from lineproof.simulators.faults import GARBAGE, FaultPlan
from lineproof.simulators.serial_analyzer import SerialAnalyzerFront, SerialCommandError, SerialReply

PROMPT = b"S2> "
LINE_END = b"\r\n"
#: Longest command line kept; further characters are echoed but dropped.
LINE_LIMIT = 1024
#: Pacing granularity: bytes are handed over in pieces of about this duration.
_PIECE_S = 0.002
#: Without an input flush from the host, the open prompt follows this long after the open.
_PROMPT_GRACE_S = 0.1
_POLL_MS = 20

_CLOSED, _OPENING, _OPEN, _DROPPED = "closed", "opening", "open", "dropped"


class LinkGone(Exception):
    """The host closed the port while the instrument was sending."""


class PtySerialServer:
    """Serve a :class:`SerialAnalyzerFront` on a new pseudo-terminal."""

    def __init__(self, front: SerialAnalyzerFront, baud_rate: int, faults: FaultPlan | None = None,
                 name: str = "serial-analyzer") -> None:
        try:
            import termios
            import tty
            from fcntl import ioctl
        except ImportError as exc:
            raise InputError("a serial analyzer is served on a pseudo-terminal, which this system lacks",
                             key="analyzer.transport", fix='use transport = "scpi" here (POSIX systems only)') from exc

        if baud_rate <= 0:
            raise ValueError("baud_rate must be positive")
        self.front = front
        self.baud_rate = baud_rate
        self.faults = faults or FaultPlan(name)
        self.byte_time_s = 10.0 / baud_rate
        self._piece = max(1, min(4096, int(_PIECE_S / self.byte_time_s)))
        self._master, slave = os.openpty()
        # No echo, no line editing, no CR/LF translation by the kernel: the instrument does it.
        tty.setraw(slave)
        self.device_path = os.ttyname(slave)
        os.close(slave)
        ioctl(self._master, termios.TIOCPKT, struct.pack("i", 1))
        self._flush_flag = getattr(termios, "TIOCPKT_FLUSHREAD", 1)
        os.set_blocking(self._master, False)
        self._stopping = threading.Event()
        self._thread = threading.Thread(target=self._run, name=name, daemon=True)
        self._state = _CLOSED
        self._opened_at = 0.0
        self._line = bytearray()
        self._in_clock = 0.0
        self._out_clock = 0.0
        self.opens = 0

    # -- life cycle ------------------------------------------------------------------------

    def start(self) -> PtySerialServer:
        self._thread.start()
        return self

    def stop(self) -> None:
        self._stopping.set()
        if self._thread.is_alive():
            self._thread.join(timeout=5)
        if self._master >= 0:
            os.close(self._master)
            self._master = -1

    # -- the loop ------------------------------------------------------------------------------

    def _run(self) -> None:
        poller = select.poll()
        poller.register(self._master, select.POLLIN)
        while not self._stopping.is_set():
            events = poller.poll(_POLL_MS)
            try:
                if not events:
                    if self._state == _OPENING and time.monotonic() - self._opened_at > _PROMPT_GRACE_S:
                        self._greet()
                    continue
                if events[0][1] & (select.POLLHUP | select.POLLERR):
                    self._closed()
                    continue
                self._read_once()
            except LinkGone:
                self._closed()

    def _closed(self) -> None:
        self._state = _CLOSED
        self._line.clear()
        self._stopping.wait(_POLL_MS / 1000)  # the hang-up stays set until the port opens

    def _greet(self) -> None:
        self._state = _OPEN
        self.opens += 1
        self._send(PROMPT)

    def _read_once(self) -> None:
        try:
            packet = os.read(self._master, 4096)
        except BlockingIOError:
            return
        except OSError as exc:
            if exc.errno == errno.EIO:
                raise LinkGone from exc
            raise
        if self._state == _CLOSED:
            self._state, self._opened_at = _OPENING, time.monotonic()
        if not packet:
            return
        if packet[0] != 0:  # a status byte from packet mode, not data
            # The input flush every open makes: greet a fresh open, and end a drop (a host
            # that closes and reopens at once may never show a hang-up between the two).
            if packet[0] & self._flush_flag and self._state in (_OPENING, _DROPPED):
                self._line.clear()
                self._greet()
            return
        if self._state == _DROPPED:
            return
        if self._state == _OPENING:
            self._greet()
        self._receive(packet[1:])

    # -- input: pacing, echo, lines ------------------------------------------------------------

    def _receive(self, data: bytes) -> None:
        self._in_clock = max(self._in_clock, time.monotonic())
        for first in range(0, len(data), self._piece):
            piece = data[first:first + self._piece]
            self._in_clock += len(piece) * self.byte_time_s
            self._wait_until(self._in_clock)
            echo = bytearray()
            for byte in piece:
                if self._state == _DROPPED:
                    return
                if byte == 0x0A:  # a LF is ignored (PROTOCOLS.md §2)
                    continue
                if byte == 0x0D:
                    self._echo(bytes(echo) + b"\r")
                    self._send(b"\n")  # the instrument's own line feed after the echoed CR
                    echo.clear()
                    command = self._line.decode("ascii", errors="replace")
                    self._line.clear()
                    self._serve(command)
                    continue
                echo.append(byte)
                if len(self._line) < LINE_LIMIT:
                    self._line.append(byte)
            if echo:
                self._echo(bytes(echo))

    def _echo(self, data: bytes) -> None:
        """Echo input as it is consumed: it is already paced at the baud rate by the input
        schedule, so it goes out at once (and later output queues behind it)."""
        self._write_all(data)
        self._out_clock = max(self._out_clock, time.monotonic())

    # -- one command, with its faults ------------------------------------------------------------

    def _serve(self, command: str) -> None:
        if not command.strip():
            self._send(PROMPT)  # an empty line only asks for the prompt: no command, no fault
            return
        if self.faults.take(("reset",), command):
            self.front.reset()
        error = self.faults.take(("error",), command)
        if error is not None:
            reply = SerialReply([f"?{error.code} {error.text}"])
        else:
            try:
                reply = self.front.execute(command)
            except SerialCommandError as exc:
                reply = SerialReply([exc.line()])
        self._wait_until(reply.ready_at)
        kinds = ("drop", "stall", "truncate", "garbage") if reply.data else ("drop", "stall", "garbage")
        fault = self.faults.take(kinds, command)
        text = b"".join(line.encode("ascii", errors="replace") + LINE_END for line in reply.lines)
        if fault is None:
            self._send(text + PROMPT)
        elif fault.kind == "drop":
            self._state = _DROPPED  # silent until the host closes and opens the port again
        elif fault.kind == "stall":
            self._stopping.wait(fault.seconds)
            self._send(text + PROMPT)
        elif fault.kind == "truncate":
            self._send(text[:max(0, len(text) - fault.bytes)])
        else:  # garbage in place of the first reply line (before the prompt if there is none)
            rest = reply.lines[1:]
            self._send(GARBAGE + LINE_END + b"".join(line.encode("ascii") + LINE_END for line in rest) + PROMPT)

    # -- output: paced writes ----------------------------------------------------------------

    def _send(self, data: bytes) -> None:
        """Write ``data`` at the baud rate: each piece leaves when its last byte would have
        left a real UART (within one call the schedule is kept, so a late wake-up is caught up)."""
        self._out_clock = max(self._out_clock, time.monotonic())
        for first in range(0, len(data), self._piece):
            piece = data[first:first + self._piece]
            self._out_clock += len(piece) * self.byte_time_s
            self._wait_until(self._out_clock)
            self._write_all(piece)

    def _write_all(self, piece: bytes) -> None:
        view = memoryview(piece)
        while view:
            if self._stopping.is_set():
                raise LinkGone
            try:
                written = os.write(self._master, view)
            except BlockingIOError:  # the host is not reading yet: wait for room, or its hang-up
                waiter = select.poll()
                waiter.register(self._master, select.POLLOUT)
                events = waiter.poll(_POLL_MS)
                if events and events[0][1] & (select.POLLHUP | select.POLLERR):
                    raise LinkGone from None
                continue
            except OSError as exc:
                raise LinkGone from exc
            view = view[written:]

    def _wait_until(self, moment: float) -> None:
        delay = moment - time.monotonic()
        if delay > 0:
            self._stopping.wait(delay)
