"""IEEE 488.2 status reporting of the simulated SCPI instruments, over real TCP through
pyvisa-py (PROTOCOLS.md §1): the status byte (*STB?) shows whether the error queue holds an
entry, the standard event status register (*ESR?) latches each error's class until it is
read, and *CLS clears both."""

from __future__ import annotations

from collections.abc import Iterator

import pytest
import pyvisa

from lineproof.simulators.bench import SimulatedBench
from lineproof.simulators.control import BenchControlClient

# IEEE 488.2-1992 §11.5.1.1 (from memory): standard event status register bits.
POWER_ON, COMMAND_ERROR, EXECUTION_ERROR, DEVICE_ERROR, QUERY_ERROR = 128, 32, 16, 8, 4
# SCPI-1999 Vol 1 §9.1 (from memory): status byte bit 2, the error/event queue is not empty.
ERROR_QUEUE = 4


@pytest.fixture(params=["analyzer", "switch"])
def link(request: pytest.FixtureRequest, start_bench) -> Iterator[tuple[pyvisa.resources.MessageBasedResource,
                                                                        SimulatedBench, str]]:
    bench: SimulatedBench = start_bench("switch-bench")
    resource = bench.visa_resource if request.param == "analyzer" else bench.switch_resource
    manager = pyvisa.ResourceManager("@py")
    try:
        opened = manager.open_resource(resource, read_termination="\n", write_termination="\n", timeout=5000)
        try:
            yield opened, bench, request.param
        finally:
            opened.close()
    finally:
        manager.close()


def test_the_status_byte_shows_the_error_queue_and_cls_clears_it(link) -> None:
    scpi, _, _ = link
    assert int(scpi.query("*ESR?")) == POWER_ON  # once after start-up
    assert int(scpi.query("*STB?")) == 0
    scpi.write("BOGus:HEADer 1")  # -113 Undefined header
    assert int(scpi.query("*STB?")) == ERROR_QUEUE
    assert int(scpi.query("*STB?")) == ERROR_QUEUE  # reading the status byte changes nothing
    assert scpi.query("SYSTem:ERRor?") == '-113,"Undefined header"'
    assert int(scpi.query("*STB?")) == 0  # the queue is empty again
    scpi.write("BOGus:HEADer 1")
    scpi.write("BOGus:HEADer 2")
    assert int(scpi.query("*STB?")) == ERROR_QUEUE
    scpi.write("*CLS")
    assert int(scpi.query("*STB?")) == 0
    assert scpi.query("SYSTem:ERRor?") == '0,"No error"'
    assert int(scpi.query("*ESR?")) == 0  # *CLS cleared the event status register too


def test_the_event_status_register_latches_each_error_class_until_read(link) -> None:
    scpi, bench, name = link
    scpi.query("*ESR?")  # clear the Power On bit
    scpi.write("BOGus:HEADer 1")  # a command error
    assert scpi.query("SYSTem:ERRor?").startswith("-113,")
    # the queue was read, the event stays latched (IEEE 488.2 §11.5.1)
    assert int(scpi.query("*ESR?")) == COMMAND_ERROR
    assert int(scpi.query("*ESR?")) == 0  # reading clears it
    with BenchControlClient(bench.control_address) as control:
        for code in (-222, -350, 7, -410):  # execution, device-dependent (negative and positive), query
            control.request("fault", instrument=name, kind="error", code=code, text="injected")
            scpi.query("*IDN?")  # the fault fires on this command
    assert int(scpi.query("*ESR?")) == EXECUTION_ERROR | DEVICE_ERROR | QUERY_ERROR
    assert int(scpi.query("*STB?")) == ERROR_QUEUE
    scpi.write("*CLS")
    assert int(scpi.query("*STB?")) == 0
