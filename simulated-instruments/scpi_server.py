"""A SCPI instrument served on a TCP socket on 127.0.0.1: the IEEE 488.2 common commands,
the error queue, the framing of program and response messages, and fault injection.

Instruments (the analyzer, the switch) subclass :class:`ScpiFront` and add their own
command table.  Framing: a program message ends in LF; the replies of one program message
form one response message, joined by ';' and ended by LF (IEEE 488.2 §8.4.1).
"""

from __future__ import annotations

import socket
import socketserver
import threading

from lineproof.simulators.faults import GARBAGE, FaultPlan
from lineproof.simulators.local_server import LocalServer
from lineproof.simulators.scpi import ScpiDispatcher

#: Longest program message accepted (a line without LF beyond this is cut off).
_MESSAGE_LIMIT = 1 << 20
#: IEEE 488.2 §11.5.1.1.2 (from memory): bit 7 of the standard event status register, Power On.
POWER_ON_BIT = 128
#: SCPI-1999 Vol 1 §9.1 (from memory): bit 2 of the status byte, error/event queue not empty.
ERROR_QUEUE_BIT = 4
#: IEEE 488.2 §11.5.1.1.8 (from memory): bit 0, Operation Complete, set by *OPC (§12.5.2).
OPERATION_COMPLETE_BIT = 1


class DataReply:
    """A reply carrying measurement data (a block or an ASCII list): what ``truncate`` cuts.
    Held as pieces (a block's header and payload) so the response is copied only once."""

    __slots__ = ("pieces",)

    def __init__(self, *pieces: bytes) -> None:
        self.pieces = pieces


class ScpiFront:
    """The command table of one SCPI instrument, its event status and its armed faults."""

    def __init__(self, identity: str, faults: FaultPlan | None = None) -> None:
        self.identity = identity
        self.dispatcher = ScpiDispatcher()
        self.faults = faults or FaultPlan("instrument")
        # Power-on: the PON bit is set until *ESR? reads it (IEEE 488.2 §11.5.1.1.2).
        self.event_status = POWER_ON_BIT
        self.dispatcher.on_error = self._latch_error
        #: *OPC was received and its Operation Complete bit is not set yet.
        self.operation_complete_armed = False
        #: One program message at a time, whichever client sent it (an instrument has one
        #: parser); the model's own lock stays free for the bench control channel.
        self.message_lock = threading.Lock()
        #: Set when the bench stops, so that a stall ends at once.
        self.stopping = threading.Event()
        self._register_common()

    def _register_common(self) -> None:
        add = self.dispatcher.add
        add("*IDN?", lambda args, sfx: self.identity)
        add("*RST", lambda args, sfx: self._reset_command())
        add("*CLS", lambda args, sfx: self._clear())
        add("*OPC?", lambda args, sfx: self.operation_complete())
        add("*OPC", lambda args, sfx: self._arm_operation_complete())
        add("*WAI", lambda args, sfx: self.wait_idle())
        add("*ESR?", lambda args, sfx: self._esr())
        # Bit 2: the error/event queue is not empty (SCPI-1999 Vol 1 §9.1, from memory); no ESB
        # (bit 5) and no service request: the simulated instruments have no *ESE or *SRE.
        add("*STB?", lambda args, sfx: str(ERROR_QUEUE_BIT if self.dispatcher.errors else 0))
        add("SYSTem:ERRor[:NEXT]?", lambda args, sfx: self.dispatcher.pop_error())

    # -- hooks for instruments ---------------------------------------------------------------

    def reset(self) -> None:
        """*RST: the instrument's power-on settings (the error queue is kept, §10.32)."""

    def wait_idle(self) -> None:
        """Block until pending operations would have finished."""

    def idle(self) -> bool:
        """Whether no operation is pending (what *OPC waits for)."""
        return True

    def operation_complete(self) -> str:
        self.wait_idle()
        return "1"

    def power_cycle(self) -> None:
        """What the ``reset`` fault does: power-on settings, a cleared error queue, and the
        Power On bit set so a careful driver can tell that it happened."""
        self._reset_command()
        self.dispatcher.errors.clear()
        self.event_status = POWER_ON_BIT

    # -- common commands ----------------------------------------------------------------------

    def _reset_command(self) -> None:
        # *RST and *CLS leave the Operation Complete Query/Command Active States (§10.32, §10.3).
        self.operation_complete_armed = False
        self.reset()

    def _clear(self) -> None:
        self.dispatcher.errors.clear()
        self.event_status = 0
        self.operation_complete_armed = False

    def _arm_operation_complete(self) -> None:
        self.operation_complete_armed = True

    def _latch_error(self, code: int) -> None:
        # IEEE 488.2 §11.5.1: an event sets its bit, which stays set until *ESR? reads the
        # register or *CLS clears it -- whether or not the error queue was read meanwhile.
        # Bit 5 command error, 4 execution error, 3 device-dependent error, 2 query error
        # (SCPI -100s, -200s, -300s and positive codes, -400s).
        if -199 <= code <= -100:
            self.event_status |= 32
        elif -299 <= code <= -200:
            self.event_status |= 16
        elif -399 <= code <= -300 or code > 0:
            self.event_status |= 8
        elif -499 <= code <= -400:
            self.event_status |= 4  # query error

    def _esr(self) -> str:
        if self.operation_complete_armed and self.idle():
            self.event_status |= OPERATION_COMPLETE_BIT
            self.operation_complete_armed = False
        value, self.event_status = self.event_status, 0
        return str(value)

    # -- one program message, with its faults -----------------------------------------------

    def execute(self, message: str) -> list[bytes | str | DataReply]:
        with self.message_lock:
            if self.faults.take(("reset",), message):
                self.power_cycle()
            replies = self.dispatcher.execute(message)
            error = self.faults.take(("error",), message)
            if error:
                self.dispatcher.push_error(error.code, error.text)
        return replies


def _response(replies: list[bytes | str | DataReply]) -> tuple[bytes, bool]:
    parts: list[bytes] = []
    for index, reply in enumerate(replies):
        if index:
            parts.append(b";")
        if isinstance(reply, DataReply):
            parts.extend(reply.pieces)
        else:
            parts.append(reply.encode("ascii") if isinstance(reply, str) else reply)
    parts.append(b"\n")
    return b"".join(parts), any(isinstance(r, DataReply) for r in replies)


class _ScpiConnectionHandler(socketserver.StreamRequestHandler):
    """One client connection: read a line, execute it, write the joined replies (or what an
    armed fault makes of them)."""

    def handle(self) -> None:
        front: ScpiFront = self.server.context  # type: ignore[attr-defined]
        self.connection.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        while True:
            try:
                line = self.rfile.readline(_MESSAGE_LIMIT)
            except OSError:
                return
            if not line:
                return
            message = line.rstrip(b"\r\n").decode("ascii", errors="replace")
            replies = front.execute(message)
            if not replies:
                continue
            response, has_data = _response(replies)
            if not self._send(front, message, response, has_data):
                return

    def _send(self, front: ScpiFront, message: str, response: bytes, has_data: bool) -> bool:
        """Write one response message; False when the connection is to end."""
        kinds = ("drop", "stall", "truncate", "garbage") if has_data else ("drop", "stall", "garbage")
        fault = front.faults.take(kinds, message)
        if fault is not None and fault.kind == "drop":
            self.connection.shutdown(socket.SHUT_RDWR)
            return False
        if fault is not None and fault.kind == "stall":
            if front.stopping.wait(fault.seconds):
                return False
        elif fault is not None and fault.kind == "truncate":
            response = response[:max(0, len(response) - 1 - fault.bytes)]
        elif fault is not None and fault.kind == "garbage":
            response = GARBAGE + b"\n"
        try:
            self.wfile.write(response)
            self.wfile.flush()
        except OSError:
            return False
        return True


class ScpiTcpServer(LocalServer):
    """Serve a SCPI front on 127.0.0.1 (port 0 = any free port) in a background thread."""

    def __init__(self, front: ScpiFront, port: int = 0, name: str = "scpi-server") -> None:
        super().__init__(_ScpiConnectionHandler, front, port, name=name)
        self.front = front

    @property
    def visa_resource(self) -> str:
        return f"TCPIP::127.0.0.1::{self.port}::SOCKET"

    def stop(self) -> None:
        self.front.stopping.set()
        super().stop()
