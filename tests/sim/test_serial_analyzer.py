"""The simulated serial analyzer on a pseudo-terminal, reached through pyserial exactly as a
USB serial port: framing, echo and prompt, errors, throughput at the baud rate, faults, and
raw data that is the error model of the truth (PROTOCOLS.md §2)."""

from __future__ import annotations

import os
import time

import numpy as np
import pytest
import serial
from error_model_reference import twelve_term_raw

from lineproof.simulators.bench import SimulatedBench
from lineproof.simulators.control import BenchControlClient
from lineproof.simulators.faults import GARBAGE

pytestmark = pytest.mark.skipif(os.name != "posix", reason="pseudo-terminals are POSIX only")

PROMPT = b"S2> "
BAUD = 57600  # tests/scenarios/serial-bench.toml
IDENTITY = "Tarnmoor Instruments,SIM-S2 serial analyzer (simulated),SIM5150,0.9"


class SerialLineClient:
    """A small host-side client of the line protocol over pyserial (the project's driver
    for it lives in drivers/; this one checks the bytes)."""

    def __init__(self, path: str, baud: int = BAUD, timeout_s: float = 3.0) -> None:
        self.port = serial.Serial(path, baud, timeout=0.05)
        self.timeout_s = timeout_s
        self._pending = b""

    def read_until(self, marker: bytes, timeout_s: float | None = None) -> bytes:
        """Bytes up to and including ``marker``; what follows stays buffered."""
        deadline = time.monotonic() + (timeout_s or self.timeout_s)
        while marker not in self._pending:
            if time.monotonic() > deadline:
                raise TimeoutError(f"no {marker!r} after {self._pending[-80:]!r}")
            self._pending += self.port.read(max(1, min(self.port.in_waiting, 4096)))
        end = self._pending.index(marker) + len(marker)
        data, self._pending = self._pending[:end], self._pending[end:]
        return data

    def read_now(self, count: int, wait_s: float) -> bytes:
        """Whatever arrives within ``wait_s`` (at most ``count`` bytes, buffered ones first)."""
        time.sleep(wait_s)
        data = self._pending + self.port.read(self.port.in_waiting)
        self._pending = b""
        return data[:count]

    def sync(self) -> None:
        """Forget whatever came before and stand at a fresh prompt (an empty line)."""
        time.sleep(0.05)
        self.port.reset_input_buffer()
        self._pending = b""
        self.port.write(b"\r")
        self.read_until(b"\r\n" + PROMPT)

    def command(self, line: str) -> list[str]:
        self.port.write(line.encode("ascii") + b"\r")
        echo = self.read_until(b"\r\n")
        assert echo == line.encode("ascii") + b"\r\n"
        body = self.read_until(PROMPT)[: -len(PROMPT)]
        return body.decode("ascii").split("\r\n")[:-1]

    def close(self) -> None:
        self.port.close()


@pytest.fixture
def bench(start_bench) -> SimulatedBench:
    return start_bench("serial-bench")


@pytest.fixture
def client(bench: SimulatedBench):
    line = SerialLineClient(bench.serial_port)
    line.sync()
    yield line
    line.close()


def test_prompt_is_sent_when_the_port_opens(bench: SimulatedBench) -> None:
    with serial.Serial(bench.serial_port, BAUD, timeout=2) as port:
        assert port.read(4) == PROMPT


def test_echo_reply_lines_and_prompt_byte_for_byte(client: SerialLineClient) -> None:
    client.port.write(b"HeLLo\r")
    expected = b"HeLLo\r\n" + IDENTITY.encode() + b"\r\n" + PROMPT
    assert client.read_until(PROMPT) == expected
    client.port.write(b"hello\r\n")  # a LF after the CR is ignored, not echoed
    assert client.read_until(PROMPT) == b"hello\r\n" + IDENTITY.encode() + b"\r\n" + PROMPT
    client.port.write(b"\r")  # an empty line: just the prompt
    assert client.read_until(PROMPT) == b"\r\n" + PROMPT
    assert client.read_now(10, 0.1) == b""  # nothing more


@pytest.mark.parametrize("line, reply", [
    ("measure", "?10 unknown command measure"),
    ("band 1e8 2e8", "?11 band takes 3 arguments"),
    ("band 1e8 0x20 201", "?20 number not understood: 0x20"),
    ("band 1e8 2e8 202", "?21 points out of range 2..201"),
    ("band 1e8 2e9 101", "?21 stop out of range 1e+08..1.5e+09"),
    ("ifbw fast", "?20 number not understood: fast"),
    ("rows raw s11", "?30 no data yet (take first)"),
    ("rows raw s22", "?21 no parameter s22 (this analyzer measures s11 s21)"),
    ("rows", "?11 rows takes raw <sij> or grid"),
])
def test_errors_are_one_line_then_the_prompt(client: SerialLineClient, line: str, reply: str) -> None:
    assert client.command(line) == [reply]


def test_raw_rows_are_the_error_model_of_the_truth(bench: SimulatedBench, client: SerialLineClient) -> None:
    with BenchControlClient(bench.control_address) as control:
        control.connect(1, "TL30-0001", "port:2")
        assert client.command("band 5e7 9e8 201") == []
        took = client.command("take")
        rows_11 = client.command("rows raw s11")
        rows_21 = client.command("rows raw S21")
        grid_rows = client.command("rows grid")
        grid = {"start_hz": 5e7, "stop_hz": 9e8, "points": 201}
        truth = control.truth_s(port=1, **grid)
        forward = control.error_terms(direction="forward", **grid)
    # took <points> in <ms> ms: points * (1/IFBW + 20 us) + 5 ms at the power-on 1 kHz IFBW
    assert took == [f"took 201 in {round((201 * (1e-3 + 20e-6) + 0.005) * 1e3)} ms"]
    assert rows_11[-1] == "end 201" and rows_21[-1] == "end 201" and grid_rows[-1] == "end 201"
    np.testing.assert_allclose([float(r) for r in grid_rows[:-1]], np.linspace(5e7, 9e8, 201), rtol=1e-9)
    values = {name: np.array([[float(x) for x in r.split()] for r in rows[:-1]])
              for name, rows in (("S11", rows_11), ("S21", rows_21))}
    expected = twelve_term_raw(truth, forward, None)
    for name, table in values.items():
        np.testing.assert_allclose(table[:, 0], np.linspace(5e7, 9e8, 201), rtol=1e-9)
        # nine significant digits per number (PROTOCOLS.md §2)
        np.testing.assert_allclose(table[:, 1] + 1j * table[:, 2], expected[name], rtol=1e-8, atol=1e-12)


def test_restart_forgets_settings_and_data(client: SerialLineClient) -> None:
    client.command("band 1e8 2e8 11")
    client.command("take")
    assert client.command("restart") == []
    assert client.command("rows raw s11") == ["?30 no data yet (take first)"]
    assert client.command("rows grid")[-1] == "end 201"


def _receive_timed(client: SerialLineClient, marker: bytes) -> tuple[int, float]:
    """Bytes received after the first arrival, and the time they took."""
    deadline = time.monotonic() + 5
    while not client._pending and time.monotonic() < deadline:
        client._pending += client.port.read(1)
    started, already = time.monotonic(), len(client._pending)
    rest = client.read_until(marker, timeout_s=30)
    return len(rest) - already, time.monotonic() - started


def test_throughput_from_the_instrument_is_the_baud_rate(client: SerialLineClient) -> None:
    client.command("band 1e8 1.5e9 201")
    client.command("take")
    client.port.write(b"rows raw s11\r")
    client.read_until(b"\r\n")  # the echo
    count, seconds = _receive_timed(client, PROMPT)
    rate = count * 10 / seconds  # 10 bits per byte: start, 8 data, stop
    print(f"instrument -> host: {count} bytes in {seconds:.3f} s = {rate:.0f} baud (configured {BAUD})")
    assert rate == pytest.approx(BAUD, rel=0.05)


def test_throughput_to_the_instrument_is_the_baud_rate(client: SerialLineClient) -> None:
    line = b" " * 3000  # echoed as it is consumed; longer than a command may be, so dropped
    client.port.write(line + b"\r")
    count, seconds = _receive_timed(client, b"\r\n")
    rate = count * 10 / seconds
    print(f"host -> instrument (echo): {count} bytes in {seconds:.3f} s = {rate:.0f} baud (configured {BAUD})")
    assert 2900 < count <= 3000 + 2 - 1
    assert rate == pytest.approx(BAUD, rel=0.05)


# -- faults ------------------------------------------------------------------------------------

def _arm(bench: SimulatedBench, **fault: object) -> None:
    with BenchControlClient(bench.control_address) as control:
        control.request("fault", instrument="analyzer", **fault)


def test_drop_goes_silent_until_the_port_is_opened_again(bench: SimulatedBench, client: SerialLineClient) -> None:
    _arm(bench, kind="drop", match="hello")
    client.port.write(b"hello\r")
    assert client.read_until(b"\r\n") == b"hello\r\n"  # the echo comes before the reply would
    assert client.read_now(100, 0.2) == b""  # no reply, no prompt
    client.port.write(b"hello\r")
    assert client.read_now(100, 0.2) == b""  # no echo either: the line is dead
    client.close()
    again = SerialLineClient(bench.serial_port)
    try:
        assert again.read_until(PROMPT, timeout_s=2) == PROMPT
        assert again.command("hello") == [IDENTITY]
    finally:
        again.close()


def test_stall_delays_reply_and_prompt(bench: SimulatedBench, client: SerialLineClient) -> None:
    _arm(bench, kind="stall", seconds=0.5)
    started = time.monotonic()
    assert client.command("hello") == [IDENTITY]
    assert time.monotonic() - started >= 0.5


def test_truncate_cuts_a_rows_reply_then_nothing(bench: SimulatedBench, client: SerialLineClient) -> None:
    client.command("band 1e8 2e8 21")
    client.command("take")
    whole = client.command("rows raw s11")
    text = "".join(line + "\r\n" for line in whole).encode()
    _arm(bench, kind="truncate", bytes=37)
    client.port.write(b"rows raw s11\r")
    client.read_until(b"\r\n")
    assert client.read_now(len(text) + 10, 0.4) == text[:-37]
    assert client.command("hello") == [IDENTITY]  # the next command is served normally


def test_garbage_replaces_the_first_reply_line(bench: SimulatedBench, client: SerialLineClient) -> None:
    _arm(bench, kind="garbage", count=2)
    client.port.write(b"hello\r")
    assert client.read_until(PROMPT) == b"hello\r\n" + GARBAGE + b"\r\n" + PROMPT
    client.port.write(b"ifbw 100\r")  # no reply lines: the garbage line comes before the prompt
    assert client.read_until(PROMPT) == b"ifbw 100\r\n" + GARBAGE + b"\r\n" + PROMPT
    assert client.command("hello") == [IDENTITY]


def test_error_answers_the_next_command(bench: SimulatedBench, client: SerialLineClient) -> None:
    _arm(bench, kind="error", code=40, text="synthesizer unlocked", match="take")
    assert client.command("hello") == [IDENTITY]
    assert client.command("take") == ["?40 synthesizer unlocked"]
    assert client.command("take")[0].startswith("took ")


def test_reset_restores_power_on_settings(bench: SimulatedBench, client: SerialLineClient) -> None:
    client.command("band 1e8 2e8 11")
    client.command("take")
    _arm(bench, kind="reset")
    assert client.command("rows raw s11") == ["?30 no data yet (take first)"]
    assert client.command("rows grid")[-1] == "end 201"
