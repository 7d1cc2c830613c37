"""Fault injection on the SCPI analyzer, seen through pyvisa-py exactly as a driver sees it:
each armed fault appears exactly as configured (PROTOCOLS.md §3) and only then."""

from __future__ import annotations

import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import pytest
import pyvisa

from lineproof.simulators.bench import SimulatedBench
from lineproof.simulators.control import BenchControlClient, ControlRequestError
from lineproof.simulators.faults import GARBAGE

IDENTITY = "Tarnmoor Instruments,SIM-R1 reflectometer (simulated),SIM0099,1.0"


@contextmanager
def scpi_link(bench: SimulatedBench, timeout_ms: int = 2000) -> Iterator[pyvisa.resources.MessageBasedResource]:
    manager = pyvisa.ResourceManager("@py")
    try:
        link = manager.open_resource(bench.visa_resource, read_termination="\n", write_termination="\n",
                                     timeout=timeout_ms)
        try:
            yield link
        finally:
            link.close()
    finally:
        manager.close()


def _block_length(header: bytes) -> int:
    # IEEE 488.2 §8.7.9: '#', one digit n, then n digits of payload length.
    digits = int(header[1:2])
    return int(header[2:2 + digits])


@pytest.fixture
def bench(start_bench) -> SimulatedBench:
    return start_bench("ideal-bench")


def _arm(bench: SimulatedBench, **fault: object) -> None:
    with BenchControlClient(bench.control_address) as control:
        control.request("fault", instrument="analyzer", **fault)


def _fired(bench: SimulatedBench) -> list[str]:
    with BenchControlClient(bench.control_address) as control:
        report = control.request("faults", instrument="analyzer")["faults"]["analyzer"]
    return [command for fault in report["armed"] + report["spent"] for command in fault["fired"]]


def test_drop_closes_the_connection_instead_of_replying(bench: SimulatedBench) -> None:
    _arm(bench, kind="drop")
    with scpi_link(bench) as link:
        link.write("SENSe:SWEep:POINts 51")  # no reply: the fault waits for a reply
        with pytest.raises(pyvisa.errors.VisaIOError):
            link.query("*IDN?")
    assert _fired(bench) == ["*IDN?"]
    with scpi_link(bench) as link:  # a new connection is served normally
        assert link.query("*IDN?") == IDENTITY
        assert link.query("SENSe:SWEep:POINts?") == "51"


def test_stall_delays_the_reply_by_the_configured_time(bench: SimulatedBench) -> None:
    _arm(bench, kind="stall", seconds=0.6)
    with scpi_link(bench, timeout_ms=200) as link:
        started = time.monotonic()
        link.write("*IDN?")
        with pytest.raises(pyvisa.errors.VisaIOError):  # longer than the client's timeout
            link.read()
        link.timeout = 3000
        assert link.read() == IDENTITY
        assert time.monotonic() - started >= 0.6
        assert link.query("*IDN?") == IDENTITY  # once only (count 1)


def test_truncate_cuts_a_block_by_exactly_the_configured_bytes(bench: SimulatedBench) -> None:
    _arm(bench, kind="truncate", bytes=100)
    with scpi_link(bench, timeout_ms=300) as link:
        link.write("FORMat:DATA REAL,64;:SENSe:SWEep:POINts 101;:INITiate;*OPC?")
        assert link.read() == "1"  # not a data reply: untouched
        link.write("TRACe:DATA? RAW")
        header = link.read_bytes(6)  # '#41616'
        expected = _block_length(header)
        assert expected == 101 * 2 * 8
        received = b""
        with pytest.raises(pyvisa.errors.VisaIOError):
            while True:
                received += link.read_bytes(1)
        assert len(received) == expected - 100  # and no terminator after it
        link.timeout = 2000
        link.write("TRACe:DATA? RAW")
        whole = link.read_bytes(6 + expected + 1)  # read_raw would stop at a 0x0A in the data
        assert whole[:6] == header and whole.endswith(b"\n")


def test_garbage_replaces_exactly_one_reply(bench: SimulatedBench) -> None:
    _arm(bench, kind="garbage", count=2, match="IDN")
    with scpi_link(bench) as link:
        assert link.query("SYSTem:ERRor?") == '0,"No error"'  # does not match: untouched
        for _ in range(2):
            link.write("*IDN?")
            assert link.read_raw() == GARBAGE + b"\n"
        assert link.query("*IDN?") == IDENTITY
    assert _fired(bench) == ["*IDN?", "*IDN?"]


def test_error_enters_the_queue_as_if_the_command_caused_it(bench: SimulatedBench) -> None:
    _arm(bench, kind="error", code=-310, text="System error", after=1)
    with scpi_link(bench) as link:
        link.write("SENSe:FREQuency:STARt 1e8")  # let through (after = 1)
        assert link.query("SYSTem:ERRor?") == '0,"No error"'  # ... and this one fires
        link.write("SENSe:FREQuency:STOP 2e8")
        # the entry of the command that fired it is queued behind the reply it answered
        assert link.query("SYSTem:ERRor?") == '-310,"System error"'
        assert link.query("SYSTem:ERRor?") == '0,"No error"'


def test_reset_restores_power_on_settings_and_sets_power_on_bit(bench: SimulatedBench) -> None:
    with scpi_link(bench) as link:
        assert link.query("*ESR?") == "128"  # IEEE 488.2 §11.5.1.1.2 (from memory): PON after power-on
        link.write("SENSe:SWEep:POINts 51;:FORMat:DATA REAL,32")
        assert link.query("*ESR?") == "0"
        _arm(bench, kind="reset")
        assert link.query("SENSe:SWEep:POINts?") == "201"  # power-on value, not 51
        assert link.query("FORMat:DATA?") == "ASCII"
        assert link.query("*ESR?") == "128"


def test_scenario_arms_faults_at_start(tmp_path, start_bench) -> None:
    source = (Path(__file__).parents[1] / "scenarios" / "ideal-bench.toml").read_text()
    path = tmp_path / "faulty.toml"
    path.write_text(source + '\n[[faults]]\nkind = "garbage"\nmatch = "*IDN?"\nafter = 1\n')
    bench = SimulatedBench(path).start()
    try:
        with scpi_link(bench) as link:
            assert link.query("*IDN?") == IDENTITY
            link.write("*IDN?")
            assert link.read_raw() == GARBAGE + b"\n"
            assert link.query("*IDN?") == IDENTITY
    finally:
        bench.stop()


@pytest.mark.parametrize("fault, message", [
    ({"kind": "explode"}, "kind must be one of drop, stall, truncate, garbage, error, reset"),
    ({"kind": "stall"}, "a stall fault needs seconds"),
    ({"kind": "stall", "seconds": "long"}, "seconds must be a number"),
    ({"kind": "truncate", "bytes": 0}, "bytes must be 1 or more"),
    ({"kind": "drop", "count": 0}, "count must be 1 or more"),
    ({"kind": "drop", "bytes": 3}, "a drop fault has no field 'bytes'"),
    ({"kind": "error", "code": -310}, "an error fault needs text"),
    ({"kind": "drop", "instrument": "oven"}, "no instrument named 'oven'"),
])
def test_bad_fault_requests_get_a_clear_error(bench: SimulatedBench, fault: dict, message: str) -> None:
    with BenchControlClient(bench.control_address) as control:
        with pytest.raises(ControlRequestError, match=message):
            control.request("fault", **fault)
        assert control.request("faults")["faults"]["analyzer"]["armed"] == []
