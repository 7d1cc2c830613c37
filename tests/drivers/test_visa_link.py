"""The VISA transport over real pyvisa / pyvisa-py sessions: the guarded pyvisa-py
workarounds take effect, and failures to open say what is wrong and what to install."""

from __future__ import annotations

import importlib.util
import select
import socket
import time
from types import SimpleNamespace

import numpy as np
import pytest
from links import DriverBench

from lineproof.drivers import ieee488, visa_backend
from lineproof.drivers.transports import VisaOptions, VisaTransport
from lineproof.errors import LinkError
from lineproof.values import SweepPlan


def _free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def test_a_refused_connection_fails_at_open() -> None:
    # pyvisa-py alone reports such a resource as open (see visa_backend.connect_error).
    resource = f"TCPIP::127.0.0.1::{_free_port()}::SOCKET"
    with pytest.raises(LinkError, match=r"cannot connect \(Connection refused\)") as caught:
        VisaTransport(resource, VisaOptions(open_timeout_s=1.0))
    assert caught.value.resource == resource


@pytest.mark.skipif(importlib.util.find_spec("usb") is not None, reason="PyUSB is installed here")
def test_a_missing_backend_package_is_named_with_the_command_that_installs_it() -> None:
    with pytest.raises(LinkError, match="Please install PyUSB.*Install it with: pip install pyusb"):
        VisaTransport("USB0::0x1234::0x5678::SN1::INSTR")


@pytest.mark.skipif(importlib.util.find_spec("gpib") is not None or importlib.util.find_spec("gpib_ctypes") is not None,
                    reason="a GPIB package is installed here")
def test_a_missing_gpib_package_is_named_with_the_command_that_installs_it() -> None:
    with pytest.raises(LinkError, match="gpib-ctypes.*Install it with: pip install gpib-ctypes"):
        VisaTransport("GPIB0::5::INSTR")


def test_a_missing_visa_library_says_what_to_do(tmp_path) -> None:
    with pytest.raises(LinkError, match="cannot load the VISA library.*check the path"):
        VisaTransport("TCPIP::127.0.0.1::1::SOCKET", VisaOptions(library=str(tmp_path / "libvisa.so")))


def test_pyvisa_py_socket_workarounds_are_applied(visa_link: DriverBench) -> None:
    link = visa_link
    transport = link.analyzer().session.transport
    backend = visa_backend._socket_session(transport._handle)
    assert backend is not None, "the resource is a pyvisa-py SOCKET session"
    assert backend.max_recv_size == visa_backend.WIDE_RECV_SIZE
    assert backend.interface.getsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY)
    assert (transport._direct is not None) == (link.name == "scpi-tcp")


def _wait_for_bytes(sock: socket.socket, count: int, timeout_s: float = 5.0) -> None:
    deadline = time.monotonic() + timeout_s
    while True:
        try:
            if len(sock.recv(count, socket.MSG_PEEK | socket.MSG_DONTWAIT)) >= count:
                return
        except BlockingIOError:
            pass
        left = deadline - time.monotonic()
        assert left > 0, "the simulator did not answer"
        select.select([sock], [], [], min(left, 0.01))


def test_block_reads_take_bytes_pyvisa_py_already_holds_first(visa_link: DriverBench) -> None:
    """Two responses back to back: the line read pulls the start of the block into
    pyvisa-py's pending buffer; the block read must take those bytes first."""
    analyzer = visa_link.analyzer()
    analyzer.configure(SweepPlan(1e8, 2e8, 101))
    expected = analyzer.measure(["S11"])["S11"]
    transport = analyzer.session.transport
    deadline = time.monotonic() + 5
    transport.write_raw(b"*OPC?\n", deadline)
    transport.write_raw(b"TRACe:DATA? RAW\n", deadline)
    # "1\n", then "#41616" (IEEE 488.2 §8.7.9, from memory: 101 points x 2 values x 8 bytes), payload, "\n"
    _wait_for_bytes(visa_backend._socket_session(transport._handle).interface, 2 + 6 + 1616 + 1)
    assert transport.read_line_raw((b"\n",), deadline, 100) == b"1\n"
    assert len(visa_backend._socket_session(transport._handle)._pending_buffer) > 0
    header = transport.read_exact_raw(6, deadline)
    assert header == b"#41616"
    payload = transport.read_exact_raw(1616, deadline)
    assert transport.read_exact_raw(1, deadline) == b"\n"
    values = ieee488.decode_real_payload(payload, "REAL,64", "little")
    np.testing.assert_array_equal(ieee488.interleaved_to_complex(values), expected)


def test_direct_socket_reads_past_their_deadline_time_out() -> None:
    # A deadline can pass between two chunks of a reply; select() refuses a negative timeout.
    ours, theirs = socket.socketpair()
    with ours, theirs:
        direct = visa_backend.DirectSocketIO(SimpleNamespace(interface=ours, _pending_buffer=bytearray()))
        past = time.monotonic() - 0.1
        with pytest.raises(TimeoutError):
            direct.read_line(b"\n", past, 100)
        with pytest.raises(TimeoutError):
            direct.read_exact(4, past)


def test_a_reply_still_missing_at_the_deadline_is_a_timeout_naming_resource_and_command(
        visa_link: DriverBench) -> None:
    link = visa_link
    analyzer = link.analyzer(timing={"command_timeout_s": 0.5, "retries": 0})
    link.arm("stall", seconds=5, match="*IDN?")  # the reply cannot have come before the read
    with pytest.raises(LinkError, match="timed out") as caught:
        analyzer.session.query("*IDN?", timeout_s=1e-6)
    assert caught.value.resource == link.resource and caught.value.command == "*IDN?"


def test_closing_one_instrument_leaves_the_others_open(link: DriverBench) -> None:
    # pyvisa hands out one resource manager per VISA library; closing it would close the
    # resources of every other instrument of the station too.
    analyzer = link.analyzer()
    other = link.analyzer()
    other.close()
    assert analyzer.identify().serial == "SIM0099"
