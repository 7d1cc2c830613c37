"""Transports: bytes in, bytes out, with deadlines.  Nothing above this module sees pyvisa
or pyserial; every error of theirs is translated here into :class:`LinkError`.

The contract is :class:`Transport`.  A deadline is an absolute ``time.monotonic()`` value:
pyvisa-py's socket timeout is an inactivity timeout, not a deadline, so the transports
cut each low-level read to the time left and check the clock between chunks.

Each transport is chosen explicitly (``open_analyzer(..., transport="visa"|"serial")``);
nothing registers itself on import, and a missing optional package is named with the
command that installs it.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass
from typing import Any, Protocol

from lineproof.drivers import visa_backend
from lineproof.errors import LinkError

#: Largest chunk asked of pyserial in one call.
_CHUNK = 1 << 20


class Transport(Protocol):
    """A byte pipe to one instrument."""

    resource: str

    @property
    def seconds_per_byte(self) -> float:
        """Wire time of one byte (0 where negligible); timeouts of long transfers scale by it."""

    def write_raw(self, data: bytes, deadline: float) -> None:
        """Send all of ``data``."""

    def read_line_raw(self, terminators: tuple[bytes, ...], deadline: float, limit: int) -> bytes:
        """Bytes up to and including the first of ``terminators`` (at most ``limit`` bytes)."""

    def read_exact_raw(self, count: int, deadline: float) -> bytes | bytearray:
        """Exactly ``count`` bytes (bytes-like; a large payload may come in the very buffer it
        was received into), or LinkError."""

    def reopen(self) -> None:
        """Drop and re-establish the link, discarding anything unread."""

    def close(self) -> None:
        """Release the link; further calls are errors."""


def _remaining(deadline: float, resource: str, what: str) -> float:
    left = deadline - time.monotonic()
    if left <= 0:
        raise LinkError(f"timed out {what}", resource=resource)
    return left


@dataclass(frozen=True)
class VisaOptions:
    """How to open a VISA resource.

    ``library`` is what ``pyvisa.ResourceManager`` takes: ``"@py"`` (pyvisa-py, the
    default), ``"@ivi"`` (the vendor VISA installed on the system) or a path to a VISA
    shared library.
    """

    library: str = "@py"
    open_timeout_s: float = 5.0
    #: Move the bytes of pyvisa-py SOCKET sessions on their socket directly (see
    #: :class:`.visa_backend.DirectSocketIO`); False keeps every byte going through pyvisa.
    direct_socket_io: bool = True


def _import_pyvisa(resource: str) -> Any:
    try:
        import pyvisa
    except ImportError as exc:  # pragma: no cover - pyvisa is a hard dependency
        raise LinkError("pyvisa is not installed; install it with: pip install pyvisa pyvisa-py",
                        resource=resource) from exc
    return pyvisa


class VisaTransport:
    """Any VISA resource string through pyvisa (pyvisa-py by default).

    Lines are read with the termination character enabled; block payloads with it disabled,
    because pyvisa-py ends a read at every termination byte inside binary data (measured:
    ~10x slower on a REAL,64 block).  The pyvisa-py workarounds live in :mod:`.visa_backend`.
    """

    seconds_per_byte = 0.0

    def __init__(self, resource: str, options: VisaOptions | None = None) -> None:
        self.resource = resource
        self._options = options or VisaOptions()
        self._manager: Any = None
        self._handle: Any = None
        self._termchar: bytes | None = None
        self._direct: visa_backend.DirectSocketIO | None = None
        self._open()

    def _open_manager(self, pyvisa: Any) -> Any:
        library = self._options.library
        try:
            return pyvisa.ResourceManager(library)
        except (OSError, ValueError) as exc:
            if library == "@py":
                hint = "install the pure-Python backend with: pip install pyvisa-py"
            else:
                hint = "check the path of your VISA library, or use '@py' after: pip install pyvisa-py"
            raise LinkError(f"cannot load the VISA library {library!r} ({exc}); {hint}",
                            resource=self.resource) from exc

    def _open(self) -> None:
        pyvisa = _import_pyvisa(self.resource)
        from pyvisa import constants

        self._constants = constants
        self._visa_error = pyvisa.errors.VisaIOError
        self._manager = self._open_manager(pyvisa)
        try:
            handle = self._manager.open_resource(self.resource,
                                                 open_timeout=int(self._options.open_timeout_s * 1000))
        except (self._visa_error, OSError, ValueError) as exc:
            hint = visa_backend.install_hint(exc)
            problem = f"this VISA backend cannot reach the resource: {hint}" if hint else f"cannot open ({exc})"
            raise LinkError(problem, resource=self.resource) from exc
        refused = visa_backend.connect_error(handle)
        if refused:
            handle.close()
            raise LinkError(f"cannot connect ({refused})", resource=self.resource)
        handle.read_termination = None
        handle.write_termination = None
        # Reads of a block header ask for a few bytes at a time; a read that fills its count
        # is normal here, not worth a warning.
        handle.visalib.issue_warning_on.discard(constants.StatusCode.success_max_count_read)
        if self.resource.upper().startswith("TCPIP"):
            visa_backend.disable_nagle(handle)
            visa_backend.widen_socket_reads(handle)
        self._direct = visa_backend.DirectSocketIO.attach(handle) if self._options.direct_socket_io else None
        self._handle = handle
        self._termchar = None

    @property
    def _lib(self) -> Any:
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
        self._lib.set_attribute(self._handle.session, self._constants.ResourceAttribute.timeout_value,
                                max(1, int(seconds * 1000)))

    def _direct_call(self, what: str, call: Any, *args: Any) -> Any:
        """One DirectSocketIO call with its Python errors translated."""
        try:
            return call(*args)
        except TimeoutError as exc:
            raise LinkError(f"timed out {what} ({exc})", resource=self.resource) from exc
        except OverflowError as exc:
            raise LinkError(str(exc), resource=self.resource) from exc
        except OSError as exc:
            raise LinkError(f"link lost {what} ({exc.strerror or exc})", resource=self.resource) from exc

    def write_raw(self, data: bytes, deadline: float) -> None:
        if self._direct is not None:
            self._direct_call("writing", self._direct.write, data, deadline)
            return
        self._set_timeout(_remaining(deadline, self.resource, "before writing"))
        try:
            self._lib.write(self._handle.session, data)
        except (self._visa_error, OSError) as exc:
            raise LinkError(f"write failed ({exc})", resource=self.resource) from exc

    def _read_chunk(self, count: int, deadline: float, what: str) -> bytes:
        self._set_timeout(_remaining(deadline, self.resource, what))
        try:
            data, _ = self._lib.read(self._handle.session, count)
        except (self._visa_error, OSError) as exc:
            if visa_backend.peer_closed(self._handle):
                raise LinkError(f"connection closed by the instrument while {what}",
                                resource=self.resource) from exc
            if getattr(exc, "error_code", None) == self._constants.StatusCode.error_timeout:
                raise LinkError(f"timed out {what}", resource=self.resource) from exc
            raise LinkError(f"read failed {what} ({exc})", resource=self.resource) from exc
        return bytes(data)

    def read_line_raw(self, terminators: tuple[bytes, ...], deadline: float, limit: int) -> bytes:
        if len(terminators) != 1 or len(terminators[0]) != 1:
            raise LinkError("a VISA read ends on one termination byte; use the serial transport "
                            f"for replies ended by {terminators!r}", resource=self.resource)
        terminator = terminators[0]
        if self._direct is not None:
            return self._direct_call("waiting for a reply line", self._direct.read_line, terminator, deadline, limit)
        self._set_termchar(terminator)
        received = bytearray()
        while not received.endswith(terminator):
            if len(received) >= limit:
                raise LinkError(f"reply longer than {limit} bytes without a line end", resource=self.resource)
            received += self._read_chunk(limit - len(received), deadline, "waiting for a reply line")
        return bytes(received)

    def read_exact_raw(self, count: int, deadline: float) -> bytes | bytearray:
        if self._direct is not None:
            return self._direct_call(f"reading {count} bytes", self._direct.read_exact, count, deadline)
        self._set_termchar(None)
        received = self._read_chunk(count, deadline, f"reading {count} bytes")
        while len(received) < count:
            received += self._read_chunk(count - len(received), deadline,
                                         f"reading {count} bytes (got {len(received)})")
        return received

    def reopen(self) -> None:
        self.close()
        self._open()

    def close(self) -> None:
        self._direct = None
        if self._handle is not None:
            try:
                self._handle.close()
            except (self._visa_error, OSError):
                pass
            self._handle = None
        # The resource manager is left open on purpose: pyvisa hands out one manager per
        # VISA library, and closing it closes every resource opened through it -- the
        # other instruments of the station included (measured with pyvisa 1.16.2).
        self._manager = None


@dataclass(frozen=True)
class SerialOptions:
    """Framing of a plain serial line (pyserial names)."""

    baud_rate: int = 115200
    byte_size: int = 8
    parity: str = "N"  # N, E, O, M, S
    stop_bits: float = 1
    flow_control: str = "none"  # "none", "rtscts", "xonxoff"

    @property
    def seconds_per_byte(self) -> float:
        """One start bit, the data bits, a parity bit if any, the stop bits (UART framing)."""
        bits = 1 + self.byte_size + (0 if self.parity == "N" else 1) + self.stop_bits
        return bits / self.baud_rate


class SerialTransport:
    """A plain serial line through pyserial: a UART, a USB virtual port, a pseudo-terminal,
    or any pyserial URL (``socket://host:port``, ``rfc2217://...``)."""

    def __init__(self, port: str, options: SerialOptions | None = None) -> None:
        self.resource = port
        self._options = options or SerialOptions()
        self._port: Any = None
        self._buffer = bytearray()
        self._searched = 0
        self._open()

    @property
    def seconds_per_byte(self) -> float:
        return self._options.seconds_per_byte

    def _open(self) -> None:
        try:
            import serial
        except ImportError as exc:  # pragma: no cover - pyserial is a hard dependency
            raise LinkError("pyserial is not installed; install it with: pip install pyserial",
                            resource=self.resource) from exc
        self._serial_error = serial.SerialException
        options = self._options
        try:
            self._port = serial.serial_for_url(
                self.resource, baudrate=options.baud_rate, bytesize=options.byte_size,
                parity=options.parity, stopbits=options.stop_bits,
                rtscts=options.flow_control == "rtscts", xonxoff=options.flow_control == "xonxoff",
                timeout=0.05, write_timeout=5.0,
            )
        except (serial.SerialException, OSError, ValueError) as exc:
            raise LinkError(f"cannot open serial port ({exc})", resource=self.resource) from exc
        self._buffer.clear()
        self._searched = 0

    def _fill(self, deadline: float, what: str) -> None:
        if self._port is None:
            raise LinkError("link is closed", resource=self.resource)
        # Block for the first byte (at most 0.2 s, so the deadline is checked often), then
        # take whatever else is waiting in one call.  pyserial reconfigures the port on every
        # timeout assignment, so an unchanged value is not assigned again.
        timeout = min(0.2, _remaining(deadline, self.resource, what))
        if timeout != self._port.timeout:
            self._port.timeout = timeout
        try:
            chunk = self._port.read(max(1, min(self._port.in_waiting, _CHUNK)))
        except (self._serial_error, OSError) as exc:
            raise LinkError(f"read failed {what} ({exc})", resource=self.resource) from exc
        self._buffer += chunk

    def write_raw(self, data: bytes, deadline: float) -> None:
        if self._port is None:
            raise LinkError("link is closed", resource=self.resource)
        # Whole tenths of a second: pyserial reconfigures the port on every assignment.
        write_timeout = math.ceil(_remaining(deadline, self.resource, "before writing") * 10) / 10
        try:
            if write_timeout != self._port.write_timeout:
                self._port.write_timeout = write_timeout
            self._port.write(data)
            self._port.flush()
        except (self._serial_error, OSError) as exc:
            raise LinkError(f"write failed ({exc})", resource=self.resource) from exc

    def _find(self, terminators: tuple[bytes, ...]) -> int:
        """End of the earliest terminator in the buffer, or -1; searches only new bytes."""
        longest = max(len(t) for t in terminators)
        start = max(0, self._searched - longest + 1)
        ends = [index + len(t) for t in terminators if (index := self._buffer.find(t, start)) >= 0]
        self._searched = len(self._buffer)
        return min(ends) if ends else -1

    def read_line_raw(self, terminators: tuple[bytes, ...], deadline: float, limit: int) -> bytes:
        while True:
            end = self._find(terminators)
            if end >= 0:
                line = bytes(self._buffer[:end])
                del self._buffer[:end]
                self._searched = 0
                return line
            if len(self._buffer) >= limit:
                raise LinkError(f"reply longer than {limit} bytes without a line end", resource=self.resource)
            self._fill(deadline, "waiting for a reply line")

    def read_exact_raw(self, count: int, deadline: float) -> bytes:
        while len(self._buffer) < count:
            self._fill(deadline, f"reading {count} bytes (got {len(self._buffer)})")
        data = bytes(self._buffer[:count])
        del self._buffer[:count]
        self._searched = 0
        return data

    def reopen(self) -> None:
        self.close()
        self._open()
        try:
            self._port.reset_input_buffer()
        except (self._serial_error, OSError) as exc:
            raise LinkError(f"cannot reset the serial port ({exc})", resource=self.resource) from exc

    def close(self) -> None:
        if self._port is not None:
            try:
                self._port.close()
            except (self._serial_error, OSError):
                pass
            self._port = None
