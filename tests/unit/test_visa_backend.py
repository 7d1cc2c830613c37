"""The pyvisa-py workarounds apply only to the backend session class they were measured on;
any other VISA library's session is left alone.  Their effect over real sockets is tested
in tests/drivers/test_visa_link.py."""

from __future__ import annotations

from types import SimpleNamespace

from lineproof.drivers import visa_backend


class _OtherBackendSession:
    max_recv_size = 4096
    _pending_buffer = bytearray()
    interface = None


def _handle(session_object: object) -> SimpleNamespace:
    def refuse(*args: object) -> None:
        raise NotImplementedError("attribute not supported")
    return SimpleNamespace(visalib=SimpleNamespace(sessions={7: session_object}), session=7,
                           set_visa_attribute=refuse)


def test_workarounds_leave_other_backends_alone() -> None:
    other = _OtherBackendSession()
    handle = _handle(other)
    assert visa_backend.widen_socket_reads(handle) is False and other.max_recv_size == 4096
    assert visa_backend.disable_nagle(handle) is False
    assert visa_backend.DirectSocketIO.attach(handle) is None
    assert visa_backend.connect_error(handle) is None
    assert visa_backend.peer_closed(handle) is False


def test_install_hint_passes_the_backends_sentence_on() -> None:
    error = ValueError("Please install PyUSB to use this resource type.\nNo module named 'usb'")
    assert visa_backend.install_hint(error) == "Please install PyUSB to use this resource type."
    assert visa_backend.install_hint(ValueError("something else")) is None
