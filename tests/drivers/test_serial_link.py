"""The serial transport on a real pseudo-terminal through pyserial: lines end at the first
of several terminators even when one arrives split across reads, and every read keeps its
deadline."""

from __future__ import annotations

import os
import sys
import time
from collections.abc import Iterator

import pytest

from lineproof.drivers.transports import SerialOptions, SerialTransport
from lineproof.errors import LinkError

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="no pseudo-terminals on Windows")


@pytest.fixture
def line() -> Iterator[tuple[int, SerialTransport]]:
    master, slave = os.openpty()
    transport = SerialTransport(os.ttyname(slave), SerialOptions(baud_rate=115200))
    os.close(slave)  # pyserial holds its own descriptor of the port
    try:
        yield master, transport
    finally:
        transport.close()
        os.close(master)


def test_a_terminator_split_across_reads_is_found(line: tuple[int, SerialTransport]) -> None:
    master, transport = line
    deadline = time.monotonic() + 5
    os.write(master, b"took 201 in 40 ms\r\nS2")
    assert transport.read_line_raw((b"\r\n", b"S2> "), deadline, 1000) == b"took 201 in 40 ms\r\n"
    assert transport.read_exact_raw(1, deadline) == b"S"
    os.write(master, b"> rest")
    assert transport.read_line_raw((b"\r\n", b"2> "), deadline, 1000) == b"2> "
    assert transport.read_exact_raw(4, deadline) == b"rest"


def test_reads_keep_their_deadline_and_their_limit(line: tuple[int, SerialTransport]) -> None:
    master, transport = line
    started = time.monotonic()
    with pytest.raises(LinkError, match="timed out") as caught:
        transport.read_line_raw((b"\r\n",), started + 0.3, 1000)
    assert caught.value.resource == transport.resource
    os.write(master, b"x" * 64)
    with pytest.raises(LinkError, match="longer than 32 bytes"):
        transport.read_line_raw((b"\r\n",), time.monotonic() + 5, 32)


def test_wire_time_follows_the_framing() -> None:
    # A UART frame is a start bit, the data bits, an optional parity bit and the stop bits.
    assert SerialOptions(115200).seconds_per_byte == pytest.approx(10 / 115200)
    assert SerialOptions(9600, byte_size=7, parity="E", stop_bits=2).seconds_per_byte == pytest.approx(11 / 9600)
