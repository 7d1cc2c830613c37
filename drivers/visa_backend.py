"""Workarounds for measured limits of the pyvisa-py backend, each one guarded.

Every function here reaches below pyvisa's public API into one pyvisa-py session class,
so each first checks that the backend session really is that class (``_socket_session``)
and does nothing otherwise: another VISA library keeps its own behaviour.  Each is
documented in DEVELOPERS.md ("Library traps") and covered by tests/unit/test_visa_backend.py
(the guard) and tests/drivers/ (the effect, over real sockets).

Measured with pyvisa 1.16.2 and pyvisa-py 0.8.1.
"""

from __future__ import annotations

import select
import socket
import time
from typing import Any

#: recv size for pyvisa-py SOCKET sessions (its default is 4096 with a select() per chunk).
WIDE_RECV_SIZE = 1 << 20


def _socket_session(handle: Any) -> Any | None:
    """The pyvisa-py TCPIP SOCKET session object behind a pyvisa resource, or None."""
    try:
        from pyvisa_py.tcpip import TCPIPSocketSession
    except ImportError:
        return None
    sessions = getattr(getattr(handle, "visalib", None), "sessions", None)
    if not isinstance(sessions, dict):
        return None
    backend = sessions.get(getattr(handle, "session", None))
    if not isinstance(backend, TCPIPSocketSession):
        return None
    if not isinstance(getattr(backend, "interface", None), socket.socket):
        return None
    return backend


def disable_nagle(handle: Any) -> bool:
    """Send small command messages at once instead of waiting for the peer's delayed ACK.

    Measured here: a command with no reply followed by a query cost 40 ms (Nagle's
    algorithm meeting a 40 ms delayed ACK) instead of 0.2 ms.  VISA's VI_ATTR_TCPIP_NODELAY
    is the standard switch; pyvisa-py 0.8 reads it but refuses to set it on SOCKET
    sessions, so for that backend the option is set on its socket directly.  Returns True
    when Nagle's algorithm is off.
    """
    from pyvisa import constants

    try:
        handle.set_visa_attribute(constants.ResourceAttribute.tcpip_nodelay, True)
        return True
    except Exception:  # noqa: BLE001 - backends raise their own types for an unsupported attribute
        pass
    backend = _socket_session(handle)
    if backend is None:
        return False
    backend.interface.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
    return True


def widen_socket_reads(handle: Any, size: int = WIDE_RECV_SIZE) -> bool:
    """Let pyvisa-py's SOCKET session take up to ``size`` bytes per recv().

    Its read loop asks the socket for at most ``max_recv_size`` (4096) bytes per select()
    and recv() pair, so a 160 kB block costs 40 pairs; measured on a 10,001-point REAL,64
    trace over loopback: 1.0 ms per read before, 0.68 ms after.  Returns True when applied.
    """
    backend = _socket_session(handle)
    if backend is None or not isinstance(getattr(backend, "max_recv_size", None), int):
        return False
    backend.max_recv_size = max(backend.max_recv_size, size)
    return True


class DirectSocketIO:
    """Reads and writes straight on a pyvisa-py SOCKET session's socket.

    pyvisa-py's read loop costs a select() and a recv() per chunk, three attribute look-ups
    per call and three copies of the data (its pending buffer, a slice, a bytes object).
    Measured on a 10,001-point REAL,64 trace (160 kB) over loopback, instrument in another
    process: 0.55-0.8 ms through pyvisa-py even with wide reads, 0.2-0.3 ms reading the
    socket into one preallocated buffer, as a plain socket client does; one ``*OPC?`` round
    trip cost 90 us through pyvisa-py against 25 us for a plain client.

    pyvisa-py still opens, configures and closes the session; this class only moves bytes,
    and it keeps them in pyvisa-py's own pending buffer so that the two paths can never
    reorder data.  It relies on two attributes of pyvisa-py 0.8's TCPIPSocketSession,
    ``interface`` (the socket) and ``_pending_buffer`` (a bytearray); :meth:`attach` checks
    both and returns None when either is missing, and the transport then keeps pyvisa-py's
    own reads and writes (``VisaOptions(direct_socket_io=False)`` asks for that too).

    Errors are Python's own: TimeoutError at the deadline, ConnectionError when the
    instrument closes the connection, OverflowError for a line longer than its limit.
    """

    _SCRATCH = 1 << 16

    def __init__(self, backend: Any) -> None:
        self._backend = backend
        self._scratch = bytearray(self._SCRATCH)

    @classmethod
    def attach(cls, handle: Any) -> DirectSocketIO | None:
        backend = _socket_session(handle)
        if backend is None or not isinstance(getattr(backend, "_pending_buffer", None), bytearray):
            return None
        return cls(backend)

    def _wait(self, readable: bool, deadline: float, what: str) -> None:
        sock = self._backend.interface
        left = deadline - time.monotonic()
        if left <= 0:  # select() refuses a negative timeout with a ValueError
            raise TimeoutError(what)
        ready = select.select([sock], [], [], left) if readable else select.select([], [sock], [], left)
        if not (ready[0] or ready[1]):
            raise TimeoutError(what)

    def write(self, data: bytes, deadline: float) -> None:
        sock: socket.socket = self._backend.interface
        view = memoryview(data)
        sent = 0
        while sent < len(data):
            try:
                sent += sock.send(view[sent:], socket.MSG_DONTWAIT)
            except BlockingIOError:
                self._wait(False, deadline, f"sent {sent} of {len(data)} bytes")

    def _receive(self, deadline: float, what: str) -> None:
        """Append what the socket holds (at least one byte) to the pending buffer."""
        sock: socket.socket = self._backend.interface
        while True:
            try:
                received = sock.recv_into(self._scratch, self._SCRATCH, socket.MSG_DONTWAIT)
            except BlockingIOError:
                self._wait(True, deadline, what)
                continue
            if received == 0:
                raise ConnectionError("connection closed by the instrument")
            self._backend._pending_buffer += memoryview(self._scratch)[:received]
            return

    def read_line(self, terminator: bytes, deadline: float, limit: int) -> bytes:
        """Bytes up to and including ``terminator``."""
        pending: bytearray = self._backend._pending_buffer
        start = 0
        while (index := pending.find(terminator, start)) < 0:
            if len(pending) >= limit:
                raise OverflowError(f"reply longer than {limit} bytes without a line end")
            start = max(0, len(pending) - len(terminator) + 1)
            self._receive(deadline, f"got {len(pending)} bytes, no line end")
        end = index + len(terminator)
        line = bytes(pending[:end])
        del pending[:end]
        return line

    def read_exact(self, count: int, deadline: float) -> bytes | bytearray:
        """Exactly ``count`` bytes, in the buffer they were received into (no copy: a 160 kB
        copy and its allocation cost as much as the read)."""
        pending: bytearray = self._backend._pending_buffer
        if len(pending) >= count:
            data = bytes(pending[:count])
            del pending[:count]
            return data
        out = bytearray(count)
        view = memoryview(out)
        got = len(pending)
        view[:got] = pending
        pending.clear()
        sock: socket.socket = self._backend.interface
        while got < count:
            try:
                received = sock.recv_into(view[got:], count - got, socket.MSG_DONTWAIT)
            except BlockingIOError:
                self._wait(True, deadline, f"got {got}")
                continue
            if received == 0:
                raise ConnectionError(f"connection closed by the instrument after {got} bytes")
            got += received
        view.release()
        return out


def connect_error(handle: Any) -> str | None:
    """Why a freshly opened SOCKET session is not connected, or None when it is.

    pyvisa-py opens a TCP socket without blocking and counts it as open once select()
    reports it readable or writable -- which a refused connection also is.  Measured: a
    resource on a port nobody listens on "opens" and then fails with a broken pipe on the
    first write and a timeout on the first read.  The socket's SO_ERROR tells the truth.
    """
    backend = _socket_session(handle)
    if backend is None:
        return None
    code = backend.interface.getsockopt(socket.SOL_SOCKET, socket.SO_ERROR)
    if code == 0:
        try:
            backend.interface.getpeername()
        except OSError as exc:
            return exc.strerror or str(exc)
        return None
    import os

    return os.strerror(code)


def peer_closed(handle: Any) -> bool:
    """True when the instrument has closed a SOCKET session's connection.

    pyvisa-py's read loop treats an empty recv() (the peer's FIN) as "no data yet" and
    waits for its timeout, so a dropped connection looks like a stalled instrument.  After
    a timeout we peek at the socket to tell the two apart in the error message.
    """
    backend = _socket_session(handle)
    if backend is None:
        return False
    sock = backend.interface
    try:
        return sock.recv(1, socket.MSG_PEEK | socket.MSG_DONTWAIT) == b""
    except BlockingIOError:
        return False
    except OSError:
        return True


#: pyvisa-py's sentences on a missing optional package (pyvisa-py 0.8.1), and the command
#: that installs what it asks for.
_INSTALL_COMMANDS = (
    ("PyUSB does not seem to be properly installed", "pip install libusb-package (a libusb backend for PyUSB)"),
    ("Please install PyUSB", "pip install pyusb"),
    ("Please install PySerial", "pip install pyserial"),
    ("gpib-ctypes", "pip install gpib-ctypes (over the linux-gpib or NI-488.2 driver)"),
    ("Please install PyVICP", "pip install pyvicp"),
)


def install_advice(sentence: str) -> str:
    """pyvisa-py's sentence on a missing package, with the command that installs it added
    when we know it."""
    for marker, command in _INSTALL_COMMANDS:
        if marker in sentence:
            return f"{sentence} Install it with: {command}"
    return sentence


def install_hint(exc: BaseException) -> str | None:
    """pyvisa-py's own sentence saying which package a resource type needs, if it gave one,
    with the command that installs it.

    pyvisa-py raises ValueError("Please install PyUSB to use this resource type.") when a
    resource's interface needs an optional package; we pass that sentence on and add the
    ``pip install`` command.
    """
    text = str(exc)
    if "Please install" in text or any(marker in text for marker, _ in _INSTALL_COMMANDS):
        return install_advice(text.splitlines()[0].strip())
    return None
