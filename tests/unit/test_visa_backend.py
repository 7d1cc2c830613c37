"""The pyvisa-py workarounds apply only to the backend session class they were measured on;
any other VISA library's session is left alone.  Their effect over real sockets is tested
in tests/drivers/test_visa_link.py."""

from __future__ import annotations

from types import SimpleNamespace

import pytest

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


@pytest.mark.parametrize(
    ("message", "command"),
    [  # pyvisa-py 0.8.1's own sentences
        ("Please install PyUSB to use this resource type.\nNo module named 'usb'", "pip install pyusb"),
        ("PyUSB does not seem to be properly installed.\nPlease refer to the PyUSB documentation",
         "pip install libusb-package"),
        ("Please install PySerial (>=3.0) to use this resource type.\nNo module named 'serial'", "pip install pyserial"),
        ("Please install linux-gpib (Linux) or gpib-ctypes (Windows, Linux) to use this resource type. Note that "
         "installing gpib-ctypes will give you access to a broader range of functionalities.\nNo module named 'gpib'",
         "pip install gpib-ctypes"),
        ("Please install PyVICP to use this resource type.", "pip install pyvicp"),
    ],
)
def test_install_hint_passes_the_backends_sentence_on_with_the_command(message: str, command: str) -> None:
    hint = visa_backend.install_hint(ValueError(message))
    assert hint.startswith(message.splitlines()[0]) and f"Install it with: {command}" in hint
    assert "\n" not in hint


def test_install_hint_is_none_for_other_errors() -> None:
    assert visa_backend.install_hint(ValueError("something else")) is None
