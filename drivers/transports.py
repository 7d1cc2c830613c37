"""Transports: bytes in, bytes out, with deadlines.  Nothing above this module sees pyvisa
or pyserial; every error of theirs is translated here into :class:`LinkError`.

The contract is four calls (see :class:`Transport`).  A deadline is an absolute
``time.monotonic()`` value: pyvisa-py's socket timeout is an inactivity timeout, not a
deadline, so the transports cut each low-level read to the time left and check the clock
between chunks.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from typing import Protocol

from lineproof.errors import LinkError

#: Largest chunk asked of the layer below in one call.
_CHUNK = 1 << 20


class Transport(Protocol):
    """A byte pipe to one instrument."""

    resource: str

    def write_raw(self, data: bytes, deadline: float) -> None:
        """Send all of ``data``."""

    def read_line_raw(self, terminator: bytes, deadline: float, limit: int) -> bytes:
        """Bytes up to and including ``terminator`` (at most ``limit`` bytes)."""

    def read_exact_raw(self, count: int, deadline: float) -> bytes:
        """Exactly ``count`` bytes, or LinkError."""

    def reopen(self) -> None:
        """Drop and re-establish the link (after a dropped connection)."""

    def close(self) -> None:
        """Release the link; further calls are errors."""


def _remaining(deadline: float, resource: str, what: str) -> float:
    left = deadline - time.monotonic()
    if left <= 0:
        raise LinkError(f"timed out {what}", resource=resource)
    return left


def _disable_nagle(handle: object) -> None:
    """Send small command messages at once instead of waiting for the peer's delayed ACK.

    Measured here: a command with no reply followed by a query cost 40 ms (Nagle's
    algorithm meeting a 40 ms delayed ACK) instead of 0.2 ms.  VISA's VI_ATTR_TCPIP_NODELAY
    is the standard switch; pyvisa-py 0.8 reads it but refuses to set it on SOCKET
    sessions, so for that backend the option is set on its socket directly.  Any other
    backend keeps its own behaviour.
    """
    import socket

    from pyvisa import constants

    try:
        handle.set_visa_attribute(constants.ResourceAttribute.tcpip_nodelay, True)
        return
    except Exception:  # noqa: BLE001 - backends raise their own types for an unsupported attribute
        pass
    backend_session = getattr(getattr(handle, "visalib", None), "sessions", {}).get(getattr(handle, "session", None))
    interface = getattr(backend_session, "interface", None)
    if isinstance(interface, socket.socket):
        interface.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)


@dataclass(frozen=True)
class VisaOptions:
    """How to open a VISA resource."""

    library: str = "@py"
    open_timeout_s: float = 5.0


class VisaTransport:
    """Any VISA resource string through pyvisa (pyvisa-py by default).

    Lines are read with the termination character enabled; block payloads with it disabled,
    because pyvisa-py ends a read at every termination byte inside binary data (measured:
    ~10x slower on a REAL,64 block).
    """

    def __init__(self, resource: str, options: VisaOptions | None = None) -> None:
        self.resource = resource
        self._options = options or VisaOptions()
        self._manager = None
        self._handle = None
        self._termchar: bytes | None = None
        self._open()

    def _open(self) -> None:
        try:
            import pyvisa
            from pyvisa import constants
        except ImportError as exc:  # pragma: no cover - pyvisa is a hard dependency
            raise LinkError(
                "pyvisa is not installed; install it with: pip install pyvisa pyvisa-py",
                resource=self.resource,
            ) from exc
        self._constants = constants
        self._visa_error = pyvisa.errors.VisaIOError
        try:
            self._manager = pyvisa.ResourceManager(self._options.library)
        except (OSError, ValueError) as exc:
            raise LinkError(
                f"cannot load the VISA library {self._options.library!r} ({exc}); "
                "for the pure-Python backend install pyvisa-py and use '@py'",
                resource=self.resource,
            ) from exc
        try:
            handle = self._manager.open_resource(
                self.resource, open_timeout=int(self._options.open_timeout_s * 1000)
            )
        except (self._visa_error, OSError, ValueError) as exc:
            raise LinkError(f"cannot open ({exc})", resource=self.resource) from exc
        handle.read_termination = None
        handle.write_termination = None
        # Reads of a block header ask for one byte at a time; a read that fills its count is
        # normal here, not worth a warning.
        handle.visalib.issue_warning_on.discard(constants.StatusCode.success_max_count_read)
        if self.resource.upper().startswith("TCPIP"):
            _disable_nagle(handle)
        self._handle = handle
        self._termchar = None

    @property
    def _lib(self):
        if self._handle is None:
            raise LinkError("link is closed", resource=self.resource)
        return self._handle.visalib

    def _set_termchar(self, terminator: bytes | None) -> None:
        if terminator == self._termchar:
            return
        attributes = self._constants.ResourceAttribute
        session = self._handle.session
        if terminator is None:
            self._lib.set_attribute(session, attributes.termchar_enabled, False)
        else:
            self._lib.set_attribute(session, attributes.termchar, terminator[0])
            self._lib.set_attribute(session, attributes.termchar_enabled, True)
        self._termchar = terminator

    def _set_timeout(self, seconds: float) -> None:
        self._handle.timeout = max(1, int(seconds * 1000))

    def write_raw(self, data: bytes, deadline: float) -> None:
        self._set_timeout(_remaining(deadline, self.resource, "before writing"))
        try:
            self._handle.write_raw(data)
        except (self._visa_error, OSError) as exc:
            raise LinkError(f"write failed ({exc})", resource=self.resource) from exc

    def _read_chunk(self, count: int, deadline: float, what: str) -> tuple[bytes, bool]:
        self._set_timeout(_remaining(deadline, self.resource, what))
        try:
            data, status = self._lib.read(self._handle.session, count)
        except (self._visa_error, OSError) as exc:
            if getattr(exc, "error_code", None) == self._constants.StatusCode.error_timeout:
                raise LinkError(f"timed out {what}", resource=self.resource) from exc
            raise LinkError(f"read failed {what} ({exc})", resource=self.resource) from exc
        ended_by_termchar = status == self._constants.StatusCode.success_termination_character_read
        return bytes(data), ended_by_termchar

    def read_line_raw(self, terminator: bytes, deadline: float, limit: int) -> bytes:
        if len(terminator) != 1:
            raise LinkError("VISA termination must be one byte", resource=self.resource)
        self._set_termchar(terminator)
        received = bytearray()
        while not received.endswith(terminator):
            if len(received) >= limit:
                raise LinkError(
                    f"reply longer than {limit} bytes without a line end", resource=self.resource
                )
            chunk, _ = self._read_chunk(limit - len(received), deadline, "waiting for a reply line")
            received += chunk
        return bytes(received)

    def read_exact_raw(self, count: int, deadline: float) -> bytes:
        self._set_termchar(None)
        received = bytearray()
        while len(received) < count:
            want = min(count - len(received), _CHUNK)
            chunk, _ = self._read_chunk(
                want, deadline, f"reading {count} bytes (got {len(received)})"
            )
            received += chunk
        return bytes(received)

    def reopen(self) -> None:
        self.close()
        self._open()

    def close(self) -> None:
        if self._handle is not None:
            try:
                self._handle.close()
            except (self._visa_error, OSError):
                pass
            self._handle = None
        if self._manager is not None:
            try:
                self._manager.close()
            except (self._visa_error, OSError):
                pass
            self._manager = None


@dataclass(frozen=True)
class SerialOptions:
    """Framing of a plain serial line (pyserial names)."""

    baud_rate: int = 115200
    byte_size: int = 8
    parity: str = "N"
    stop_bits: float = 1
    flow_control: str = "none"  # "none", "rtscts", "xonxoff"


class SerialTransport:
    """A plain serial line through pyserial: a UART, a USB virtual port or a pseudo-terminal."""

    def __init__(self, port: str, options: SerialOptions | None = None) -> None:
        self.resource = port
        self._options = options or SerialOptions()
        self._port = None
        self._buffer = bytearray()
        self._open()

    def _open(self) -> None:
        try:
            import serial
        except ImportError as exc:  # pragma: no cover - pyserial is a hard dependency
            raise LinkError(
                "pyserial is not installed; install it with: pip install pyserial",
                resource=self.resource,
            ) from exc
        self._serial_error = serial.SerialException
        options = self._options
        try:
            self._port = serial.serial_for_url(
                self.resource,
                baudrate=options.baud_rate,
                bytesize=options.byte_size,
                parity=options.parity,
                stopbits=options.stop_bits,
                rtscts=options.flow_control == "rtscts",
                xonxoff=options.flow_control == "xonxoff",
                timeout=0.05,
                write_timeout=5.0,
            )
        except (serial.SerialException, OSError, ValueError) as exc:
            raise LinkError(f"cannot open serial port ({exc})", resource=self.resource) from exc
        self._buffer.clear()

    def _fill(self, deadline: float, what: str) -> None:
        self._port.timeout = min(0.2, _remaining(deadline, self.resource, what))
        try:
            waiting = self._port.in_waiting
            chunk = self._port.read(max(1, min(waiting, _CHUNK)))
        except (self._serial_error, OSError) as exc:
            raise LinkError(f"read failed {what} ({exc})", resource=self.resource) from exc
        self._buffer += chunk

    def write_raw(self, data: bytes, deadline: float) -> None:
        _remaining(deadline, self.resource, "before writing")
        try:
            self._port.write(data)
            self._port.flush()
        except (self._serial_error, OSError) as exc:
            raise LinkError(f"write failed ({exc})", resource=self.resource) from exc

    def read_line_raw(self, terminator: bytes, deadline: float, limit: int) -> bytes:
        what = "waiting for a reply line"
        while True:
            index = self._buffer.find(terminator)
            if index >= 0:
                end = index + len(terminator)
                line = bytes(self._buffer[:end])
                del self._buffer[:end]
                return line
            if len(self._buffer) >= limit:
                raise LinkError(
                    f"reply longer than {limit} bytes without a line end", resource=self.resource
                )
            self._fill(deadline, what)

    def read_exact_raw(self, count: int, deadline: float) -> bytes:
        while len(self._buffer) < count:
            self._fill(deadline, f"reading {count} bytes (got {len(self._buffer)})")
        data = bytes(self._buffer[:count])
        del self._buffer[:count]
        return data

    def reopen(self) -> None:
        self.close()
        self._open()

    def close(self) -> None:
        if self._port is not None:
            try:
                self._port.close()
            except (self._serial_error, OSError):
                pass
            self._port = None
